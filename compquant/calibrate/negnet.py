"""Analyte lines whose net signal is significantly negative: a side window holds another line.

The net intensity of a window line is the signal in its window less the background estimated
from its side windows.  A line's emission is never negative, so a net below zero by more than
``k`` times its own standard uncertainty (``net < -k u_net``, :data:`NEGATIVE_NET_K` = 3; a
one-sided 3-sigma decision, common practice, false alarm 0.13 % for a line truly at zero) means
that the background estimate exceeds the window's whole signal: a side window holds signal of
another line (e.g. the wing of Cu I 467.479 nm in the blue side window of Zn I 468.014 nm in a
copper alloy).  The background error in that sample is then at least ``|net|``.

A calibration curve can take up such an error through its intercept only for samples that carry
it like its standards do (ISO 11095:1996 and ISO 8466-1:1990: a calibration function holds for
samples like the reference materials it was made from; from memory of those standards).
Neither the sample's own repeatability nor the curve's excess scatter, which the standards show
mostly where the analyte signal dominates, measures how far the error in *this* sample departs
from the standards': the internal standard (another line of the matrix element) does not follow
the interfering line's wing through the side-window background.  In the demo (Zn I 468.014 nm
in the bronze LOT-2611-B, five calibration days, docs/calibration.md sec. 12) the same sample's
net was -27, -25, -26, -27 and -16 (counts): on the fifth day its background error departed from
the standards' by 0.70 of its own size and the result, 2.07 +- 0.19 % for a true 1.18 %, was
9 standard uncertainties off, while the bracketing bronze standard sat on the curve.  The cause
that day: the sample's measured wavelength shift (0.00133 nm, u 0.00068 nm) moved the side window's
outer edge past a pixel on the Cu line's shoulder, and side windows take whole pixels, so the
background stepped by 11.5 counts.  No within-run check (bracketing standards, their residuals)
would have caught it.

The rule (``negative-net``): such a result is reported with the flag ``negative_net`` and a Type B
component for the departure of its background error from the standards', taken as rectangular
with half-width equal to the smallest background error the sample is known to carry,
``e = |net| / I_istd`` in response units (GUM 4.3.7: only bounds known), i.e.

    u_bg(x0) = e / (sqrt(3) |f'(x0)|),   nu = infinity,

added in quadrature to ``u(x0)`` before the closure (so the matrix by difference and every result
that is a ratio to it carry it too).  On the five demo days the largest departure was 0.70 e;
``k u_bg`` with ``k = 2`` is 1.15 e.  The value is then indicative (U often above the value):
the certificate says why in plain words.

- :func:`negative_net` -- the test on one sample's line;
- :func:`widen_negative_net` -- the added component on an inverse prediction;
- :func:`check_standards` -- at calibration time: the standards whose analyte net is
  significantly negative, with candidate interfering lines from the shipped atomic database
  (:func:`interfering_candidates`); a :class:`NegativeNetWarning` per curve, kept in the
  curve's ``diagnostics["negative_net"]``.
"""

from __future__ import annotations

import math

import numpy as np

from compquant.errors import CompquantError

#: a net intensity below ``-NEGATIVE_NET_K * u_net`` is significantly negative (one-sided 3 sigma)
NEGATIVE_NET_K = 3.0

#: lines of other species within this distance (nm) of the analyte line are named as candidates
#: for the signal in its side windows (a judgement: side windows reach a few tenths of a nm beyond
#: the line window, and a strong line's instrumental and Stark wings further)
CANDIDATE_RADIUS_NM = 1.0


class NegativeNetWarning(UserWarning):
    """Standards of a curve have a significantly negative analyte net (a side window holds another line)."""


def negative_net(net, u_net, k: float = NEGATIVE_NET_K) -> bool:
    """True when the net intensity ``net`` is below ``-k u_net`` (both finite, ``u_net > 0``)."""
    try:
        net, u_net = float(net), float(u_net)
    except (TypeError, ValueError):
        return False
    return math.isfinite(net) and math.isfinite(u_net) and u_net > 0 and net < -k * u_net


def widen_negative_net(p: dict, r, k: float = NEGATIVE_NET_K) -> dict:
    """The inverse prediction ``p`` (:meth:`Curve.predict_content`) with the negative-net component.

    ``r``: the sample's response row (``net``, ``u_net``, ``per_net``: response units per unit of
    net intensity, :func:`compquant.calibrate.response.sample_responses`).  When the net is
    significantly negative (:func:`negative_net`) the background error is at least
    ``e = |net| per_net`` (response units) and ``u_bg^2 = (e / (sqrt(3) f'(x0)))^2`` joins the budget
    (key ``"background"``) with infinite degrees of freedom: ``nu_eff`` follows Welch-Satterthwaite
    (GUM G.4.1), ``nu' = nu (u'^2 / u^2)^2``.  Otherwise ``p`` is returned unchanged.
    """
    get = r.get if hasattr(r, "get") else (lambda key, default=None: default)
    net, u_net, per = get("net", math.nan), get("u_net", math.nan), get("per_net", 1.0)
    if not negative_net(net, u_net, k):
        return p
    e = abs(float(net)) * abs(float(per))
    dydx = float(p.get("dydx", math.nan))
    if not (math.isfinite(e) and e > 0 and math.isfinite(dydx) and dydx != 0):
        return p
    v_bg = (e / (math.sqrt(3.0) * dydx)) ** 2
    u2 = float(p["u"]) ** 2
    var = u2 + v_bg
    dof = float(p["dof"])
    dof = dof * (var / u2) ** 2 if u2 > 0 and math.isfinite(dof) else math.inf
    return {**p, "u": math.sqrt(var), "dof": dof, "budget": {**p["budget"], "background": v_bg}}


def interfering_candidates(line_id: str, contents: dict, *, lines=None, temperature_k: float = 10000.0,
                           radius_nm: float = CANDIDATE_RADIUS_NM, n: int = 2) -> list[str]:
    """Lines of the sample's other elements within ``radius_nm`` of ``line_id``, strongest first.

    Strength: ``w_el g_k A_ki exp(-E_k / kT) / U(T)`` of the line (``w_el``: the element's mass
    fraction from ``contents``, e.g. the standards' mean; ``U``: the species' partition function,
    1 where none is shipped): the Boltzmann factor of an optically thin line (common practice),
    without the ionisation balance or atomic masses -- a ranking of candidates, not a prediction.
    ``lines``: the line list (default the shipped atomic database).  Returns line ids (e.g.
    ``"Cu I 467.479 (0.53 nm blue)"``), empty when the analyte line is not in the list.
    """
    from compquant.atomic.partition import partition_function
    from compquant.plasma.constants import KB_EV

    if lines is None:
        from compquant.atomic import load_line_list

        lines = load_line_list()
    ref = lines[lines["line_id"].astype(str) == str(line_id)]
    if ref.empty:
        return []
    wl0 = float(ref["wavelength_nm"].iloc[0])
    el0 = str(ref["element"].iloc[0])
    near = lines[((lines["wavelength_nm"] - wl0).abs() <= radius_nm) & (lines["element"] != el0)
                 & lines["element"].isin([e for e, w in contents.items() if w > 0])]
    if near.empty:
        return []
    kt = KB_EV * temperature_k
    pf = {}
    for sp in near["species"].unique():
        try:
            pf[sp] = float(partition_function(str(sp), temperature_k))
        except (CompquantError, KeyError, ValueError):  # no partition function shipped: rank without it
            pf[sp] = 1.0
    s = (near["element"].map(contents).astype(float) * near["gk"] * near["aki"] * np.exp(-near["ek_ev"] / kt)
         / near["species"].map(pf).astype(float))
    top = near.assign(_s=s.to_numpy()).sort_values("_s", ascending=False).head(n)
    out = []
    for r in top.itertuples(index=False):
        d = float(r.wavelength_nm) - wl0
        out.append(f"{r.line_id} ({abs(d):.2f} nm {'blue' if d < 0 else 'red'})")
    return out


def check_standards(curves: dict, certs: dict, k: float = NEGATIVE_NET_K, *, lines=None) -> dict[str, dict]:
    """Standards of each curve whose analyte net is significantly negative (:func:`negative_net`).

    ``curves``: element -> Curve whose ``standards`` records carry ``net`` and ``u_net``;
    ``certs``: standard id -> element -> (w, u) (:func:`compquant.calibrate.build.certified_table`),
    for the candidates' contents.  Returns ``{element: {"line", "standards": [{"standard_id", "net",
    "u_net", "used"}], "candidates", "warning"}}`` for the curves with such standards, and issues one
    :class:`NegativeNetWarning` per curve naming the line, the standards and the candidates.
    """
    import warnings

    out: dict[str, dict] = {}
    for el, c in curves.items():
        neg = [{"standard_id": s.get("standard_id"), "net": float(s["net"]), "u_net": float(s["u_net"]),
                "used": bool(s.get("used", True))}
               for s in c.standards if negative_net(s.get("net"), s.get("u_net"), k)]
        if not neg:
            continue
        contents: dict[str, list] = {}
        for s in c.standards:
            for e, (w, _u) in certs.get(s.get("standard_id"), {}).items():
                contents.setdefault(e, []).append(float(w))
        mean = {e: float(np.mean(v)) for e, v in contents.items()}
        try:
            cand = interfering_candidates(c.line_id, mean, lines=lines)
        except (CompquantError, KeyError, ValueError, OSError):  # the warning stands without candidates
            cand = []
        names = ", ".join(f"{s['standard_id']} ({s['net']:.3g} +- {s['u_net']:.2g})" for s in neg)
        text = (f"{c.line_id}: the net signal is significantly negative (below -{k:g} u) in standard(s) {names}: "
                "the background from the side windows exceeds the line window's whole signal, so a side window "
                "holds another line's signal"
                + (f" (candidates: {', '.join(cand)})" if cand else "")
                + "; samples with a significantly negative net on this line get the flag negative_net and an "
                "uncertainty for it (rule negative-net). Narrow the side windows away from that line, or choose "
                "another line")
        out[el] = {"line": c.line_id, "standards": neg, "candidates": cand, "warning": text}
        c.diagnostics["negative_net"] = out[el]
        warnings.warn(text, NegativeNetWarning, stacklevel=3)
    return out


__all__ = ["CANDIDATE_RADIUS_NM", "NEGATIVE_NET_K", "NegativeNetWarning", "check_standards",
           "interfering_candidates", "negative_net", "widen_negative_net"]

"""Responses of samples for one analyte: line intensity, or its ratio to an internal-standard line.

Ratio of means with the per-shot covariance (first-order propagation, GUM 5.1.2)::

    R = Ibar_a / Ibar_s
    u^2(R) = R^2 [ s_a^2/(n Ibar_a^2) + s_s^2/(n Ibar_s^2) - 2 s_as/(n Ibar_a Ibar_s) ]

The covariance term is why an internal standard helps: shot-to-shot
fluctuations of ablated mass and plasma affect both lines alike.  Without the
per-shot table the lines are taken as independent:
``u^2(R) = R^2 [(u_a/I_a)^2 + (u_s/I_s)^2]``.  With it, the part of each line's ``u`` that does
not come from the shot spread (the profile-shape term of fitted lines, ``u^2 - sd^2/n``) is
added to the paired-shot variance through the ratio, so no part of the line's own uncertainty
is dropped.  Per-shot values of the response
are the linearised ratios ``R + (I_a - Ibar_a)/Ibar_s - R (I_s - Ibar_s)/Ibar_s``,
whose mean is ``R`` and whose spread matches ``u(R)``; they serve the
lack-of-fit test and blank statistics.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from compquant.errors import CalibrationError


def _line_rows(line_table: pd.DataFrame, line_id: str) -> pd.DataFrame:
    return line_table[line_table["line_id"] == line_id].set_index("sample_id")


def _by_shot(g: pd.DataFrame) -> pd.DataFrame:
    """``g.sort_values("shot")``; ``g`` itself (no copy) when its shot numbers already strictly
    increase, which is the same frame: the identity order, whatever the sorting algorithm."""
    s = g["shot"]
    return g if s.is_monotonic_increasing and s.is_unique else g.sort_values("shot")


def _non_shot_u(row) -> float:
    """The part of a line's ``u_intensity`` that the shot-to-shot spread does not carry,
    ``sqrt(max(u^2 - sd^2/n, 0))`` (intensity units) (the profile-fit shape
    term of ``fit`` mode lines; 0 for ``window`` lines, where ``u = sd/sqrt(n)``).  0 when the
    line table has no ``sd_shots`` column or fewer than two shots."""
    try:
        u, sd, n = float(row["u_intensity"]), float(row.get("sd_shots", np.nan)), int(row["n_shots"])
    except (KeyError, TypeError, ValueError):
        return 0.0
    if not (np.isfinite(u) and np.isfinite(sd) and n >= 2):
        return 0.0
    return float(np.sqrt(max(u * u - sd * sd / n, 0.0)))


#: columns of :func:`sample_responses`; ``net`` / ``u_net``: the analyte line's own net intensity and
#: its standard uncertainty (line table ``intensity`` / ``u_intensity``), whatever the basis, and
#: ``per_net``: response units per unit of net intensity (1, or 1 / the internal standard's mean)
RESPONSE_COLUMNS = ["sample_id", "y", "u_y", "n_shots", "flags", "shots", "net", "u_net", "per_net"]


def sample_responses(
    line_table: pd.DataFrame,
    line_id: str,
    internal_standard: str | None = None,
    shot_table=None,
    where: str = "calibration",
) -> pd.DataFrame:
    """Per sample: ``y, u_y, n_shots, flags``, ``shots`` (array of per-shot responses or None) and the
    analyte line's own ``net`` intensity with its ``u_net`` (for the negative-net rule,
    :mod:`compquant.calibrate.negnet`).

    ``shot_table``: the long per-shot table (``sample_id, shot, line_id, intensity[, accepted]``),
    or a :class:`compquant.lines.shotview.ShotView` (``LineMeasurement.shot_view``), which gives the
    same rows per sample for the analyte and internal-standard lines only, so memory stays
    independent of the number of lines; None: no per-shot values.

    Raises CalibrationError when the analyte (or internal-standard) line is not in
    the line table.
    """
    a = _line_rows(line_table, line_id)
    if a.empty:
        raise CalibrationError(
            f"line '{line_id}' is not in the line table",
            where=where,
            fix="add the line to the method's [[lines]] or fix the line id",
        )
    s = None
    if internal_standard:
        s = _line_rows(line_table, internal_standard)
        if s.empty:
            raise CalibrationError(
                f"internal-standard line '{internal_standard}' is not in the line table",
                where=where,
                fix="add it to the method's [[lines]] or fix the line id",
            )
    shots_a = shots_s = None
    if hasattr(shot_table, "line_frames") and len(shot_table):  # compact view: per sample, one line
        shots_a = {k: _by_shot(g) for k, g in shot_table.line_frames(line_id).items()}
        if internal_standard:
            shots_s = {k: _by_shot(g) for k, g in shot_table.line_frames(internal_standard).items()}
    elif shot_table is not None and len(shot_table):
        if "accepted" in shot_table:
            shot_table = shot_table[shot_table["accepted"].astype(bool)]
        sa = shot_table[shot_table["line_id"] == line_id]
        shots_a = {k: g.sort_values("shot") for k, g in sa.groupby("sample_id", sort=False)}
        if internal_standard:
            ss = shot_table[shot_table["line_id"] == internal_standard]
            shots_s = {k: g.sort_values("shot") for k, g in ss.groupby("sample_id", sort=False)}
    rows = []
    for sid, r in a.iterrows():
        flags = [f for f in str(r.get("flags", "") or "").split(";") if f]
        Ia, ua, n = float(r["intensity"]), float(r["u_intensity"]), int(r["n_shots"])
        shots = None
        per_net = 1.0  # response units per unit of net intensity (1 / internal-standard intensity)
        if s is None:
            y, uy = Ia, ua
            if shots_a is not None and sid in shots_a:
                shots = shots_a[sid]["intensity"].to_numpy(float)
        else:
            if sid not in s.index:
                continue
            rs = s.loc[sid]
            Is, us = float(rs["intensity"]), float(rs["u_intensity"])
            flags += [f"istd_{f}" for f in str(rs.get("flags", "") or "").split(";") if f]
            if not (np.isfinite(Is) and Is > 0):
                flags.append("istd_not_positive")
                y, uy = np.nan, np.nan
            else:
                y = Ia / Is
                per_net = 1.0 / Is
                uy = float(np.sqrt((ua / Is) ** 2 + (Ia * us / Is**2) ** 2))
                if shots_a is not None and shots_s is not None and sid in shots_a and sid in shots_s:
                    ga, gs = shots_a[sid], shots_s[sid]
                    m = ga.merge(gs, on="shot", suffixes=("_a", "_s"))
                    if len(m) >= 2:
                        xa = m["intensity_a"].to_numpy(float)
                        xs = m["intensity_s"].to_numpy(float)
                        ma, ms = xa.mean(), xs.mean()
                        if ms > 0:
                            y = ma / ms
                            per_net = 1.0 / ms
                            shots = y + (xa - ma) / ms - y * (xs - ms) / ms
                            # paired shots: the covariance term of GUM 5.2.2 (eq. 16) is in the
                            # spread of the linearised ratios; the part of each line's u that does
                            # not average over shots (profile-shape uncertainty of a fitted line) is
                            # added back, propagated through the ratio
                            ea = _non_shot_u(r) / Ia if Ia > 0 else 0.0  # relative
                            es = _non_shot_u(rs) / Is
                            uy = float(np.sqrt(np.var(shots, ddof=1) / len(shots) + (y * ea) ** 2
                                               + (y * es) ** 2))
                            n = len(shots)
        rows.append({"sample_id": sid, "y": y, "u_y": uy, "n_shots": n, "flags": flags, "shots": shots,
                     "net": Ia, "u_net": ua, "per_net": per_net})
    return pd.DataFrame(rows, columns=RESPONSE_COLUMNS).set_index(
        "sample_id", drop=False
    )


__all__ = ["RESPONSE_COLUMNS", "sample_responses"]

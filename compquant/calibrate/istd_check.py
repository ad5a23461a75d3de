"""Warnings on the choice of an internal-standard line, with suggested alternatives.

An internal standard divides out shot-to-shot changes of the ablated mass and plasma; it
only works when the standard line responds to the plasma like the analyte line.  A resonance
line (lower level in the ground term) of a major element is strongly self-absorbed: its
intensity grows sublinearly and depends on the plasma's column density, so the ratio drifts
with the matrix — an aluminium-alloy calibration on Al I 394.401 read Si and Zn 5–12 % low in
an outside check.  Common practice: choose a non-resonance line of the matrix element whose
upper-level energy is close to the analyte line's (then the ratio hardly depends on T).

:func:`internal_standard_warnings` returns plain-text warnings (empty when the choice is
sound) and the alternatives; the caller (calibration set-up, CLI) decides how to show them.
"""

from __future__ import annotations

import math

import numpy as np

from compquant.atomic import K_B_EV

#: lower levels up to this energy count as the ground term (a judgement: fine-structure
#: components of ground terms lie within a few tenths of an eV and are as heavily populated)
GROUND_TERM_EV = 0.1


def _row(lines, line_id):
    m = lines["line_id"].astype(str) == str(line_id)
    return None if not m.any() else lines[m].iloc[0]


def suggest_alternatives(lines, istd_id, analyte_id=None, *, temperature_k=10000.0, n=3) -> list[str]:
    """Non-resonance lines of the internal standard's element, closest in upper-level energy to
    the analyte line (or strongest at ``temperature_k`` when no analyte is given)."""
    ref = _row(lines, istd_id)
    if ref is None:
        return []
    same = lines[(lines["element"] == ref["element"]) & (lines["line_id"].astype(str) != str(istd_id))
                 & (lines["ei_ev"] > GROUND_TERM_EV)]
    if same.empty:
        return []
    kt = K_B_EV * temperature_k
    strength = same["gk"] * same["aki"] * np.exp(-same["ek_ev"] / kt)
    ana = None if analyte_id is None else _row(lines, analyte_id)
    if ana is not None:
        key = (same["ek_ev"] - float(ana["ek_ev"])).abs() - 1e-12 * strength
    else:
        key = -strength
    return [str(x) for x in same.assign(_k=key.to_numpy()).sort_values("_k")["line_id"].head(n)]


def internal_standard_warnings(istd_id: str, *, lines=None, analyte_id: str | None = None,
                               self_absorbed: set[str] | None = None) -> tuple[list[str], list[str]]:
    """``(warnings, alternatives)`` for an internal-standard line.

    ``lines``: the line list (default :func:`compquant.atomic.load_line_list`);
    ``self_absorbed``: line ids found self-absorbed elsewhere (e.g. the ``self_absorbed`` flags
    of a calibration-free result on the same run).
    """
    if lines is None:
        from compquant.atomic import load_line_list

        lines = load_line_list()
    warns: list[str] = []
    ref = _row(lines, istd_id)
    if ref is None:
        return [f"internal standard {istd_id} is not in the line list: its level energies are unknown"], []
    ei = float(ref["ei_ev"])
    if math.isfinite(ei) and ei <= GROUND_TERM_EV:
        warns.append(f"internal standard {istd_id} is a resonance line (lower level {ei:.3f} eV, ground "
                     "term): it self-absorbs in a dense plasma and the intensity ratio then drifts with "
                     "the matrix")
    if self_absorbed and istd_id in self_absorbed:
        warns.append(f"internal standard {istd_id} was found self-absorbed on this run")
    ana = None if analyte_id is None else _row(lines, analyte_id)
    if ana is not None and abs(float(ana["ek_ev"]) - float(ref["ek_ev"])) > 1.0:
        warns.append(f"upper levels of {analyte_id} ({float(ana['ek_ev']):.2f} eV) and {istd_id} "
                     f"({float(ref['ek_ev']):.2f} eV) differ by more than 1 eV: the ratio depends on "
                     "the plasma temperature")
    alts = suggest_alternatives(lines, istd_id, analyte_id) if warns else []
    return warns, alts


__all__ = ["GROUND_TERM_EV", "internal_standard_warnings", "suggest_alternatives"]

"""Shewhart control charts of check samples and drift-correction factors, after ISO 7870-2.

One point per run (the latest analysis of each run file), in the order the runs were measured.
Chart of individual values (ISO 7870-2:2023, the X chart of individuals):

- limits from the **certified value** (ISO 7870-2 "standard values given"): centre line
  ``CL = X_cert`` and ``sigma = U_cert / k`` (the certified value's standard uncertainty, k = 2
  unless the method says otherwise);
- limits from the **first N runs** (the default; ISO 7870-2 "no standard value given",
  individuals with the moving range of two consecutive values): ``CL = mean(x_1..x_N)``,
  ``sigma = MRbar / d2`` with ``MRbar = mean(|x_i - x_{i-1}|)`` over those runs and
  ``d2 = 1.128`` (n = 2), so the action limits are ``CL +/- 3 MRbar / d2 = CL +/- 2.660 MRbar``;
  until N runs exist the limits are provisional, from all runs so far (at least two);
- warning limits ``CL +/- 2 sigma``, action (control) limits ``CL +/- 3 sigma``.

Tests for special causes (ISO 7870-2:2023 Annex, the eight tests of the Shewhart chart; zones
A, B, C are the bands 2-3, 1-2 and 0-1 sigma from the centre line; from memory of ISO 7870-2):

1. one point beyond zone A (outside the action limits);
2. nine points in a row in zone C or beyond on one side of the centre line;
3. six points in a row steadily increasing or decreasing;
4. fourteen points in a row alternating up and down;
5. two out of three points in a row in zone A or beyond (same side);
6. four out of five points in a row in zone B or beyond (same side);
7. fifteen points in a row in zone C (both sides);
8. eight points in a row on both sides of the centre line with none in zone C.

Method section (all keys optional)::

    [control_chart]
    limits = "first-runs"     # or "certified"; drift factors always use "first-runs"
    first_runs = 20           # N for "first-runs" (at least 2)
    k = 2.0                   # coverage factor of the certified values' U
    rules = [1, 2, 3, 5, 6]   # which tests a run must pass
    block_release = false     # true: a broken rule at a run blocks release of its certificates
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field

import numpy as np

from compquant.errors import MethodError
from compquant.settings import Setting, Table

#: d2 for moving ranges of two consecutive values (ISO 7870-2:2023, Table of factors; n = 2)
D2_N2 = 1.128

RULE_TEXT = {
    1: "one point beyond the action limits (3 sigma)",
    2: "nine points in a row on one side of the centre line",
    3: "six points in a row steadily increasing or decreasing",
    4: "fourteen points in a row alternating up and down",
    5: "two out of three points beyond 2 sigma on one side",
    6: "four out of five points beyond 1 sigma on one side",
    7: "fifteen points in a row within 1 sigma of the centre line",
    8: "eight points in a row beyond 1 sigma on either side",
}


@dataclass(frozen=True)
class ChartSettings:
    limits: str = "first-runs"
    first_runs: int = 20
    k: float = 2.0
    rules: tuple[int, ...] = (1, 2, 3, 5, 6)
    block_release: bool = False

    def as_dict(self) -> dict:
        d = asdict(self)
        d["rules"] = list(self.rules)
        return d

    @classmethod
    def from_dict(cls, d: dict | None) -> ChartSettings:
        d = dict(d or {})
        if "rules" in d:
            d["rules"] = tuple(d["rules"])
        return cls(**d)


#: the ``[control_chart]`` table of a method file (owned here; docs/record.md)
CHART_TABLE = Table("control_chart", (
    Setting("limits", "str", "first-runs", "where the limits come from: the check material's certified value "
            "(ISO 7870-2 standard values given) or the first runs (moving range)",
            choices=("first-runs", "certified")),
    Setting("first_runs", "int", 20, "N for limits from the first runs (provisional until N runs exist)", min=2,
            fix="e.g. first_runs = 20"),
    Setting("k", "float", 2.0, "coverage factor of the certified values' U (sigma = U / k)", min=0, min_open=True,
            fix="e.g. k = 2"),
    Setting("rules", "list", [1, 2, 3, 5, 6], "tests for special causes a run must pass (ISO 7870-2, 1 to 8)",
            item="int", min=1, max=8, fix="e.g. rules = [1, 2, 3]"),
    Setting("block_release", "bool", False, "a broken rule at a run blocks the release of its certificates"),
), doc="Shewhart individuals charts of check samples and drift factors (ISO 7870-2).",
   owner="compquant.record.charts")


def parse_chart_section(section: dict | None, where: str = "method") -> ChartSettings:
    """Validate a method's ``[control_chart]`` table (None: the defaults) through :data:`CHART_TABLE`."""
    if section is None:
        return ChartSettings()
    v = CHART_TABLE.parse(section, f"{where}: [control_chart]", MethodError)
    return ChartSettings(v["limits"], v["first_runs"], float(v["k"]), tuple(sorted(set(v["rules"]))),
                         v["block_release"])


@dataclass
class Limits:
    """Centre line, sigma and how they were set."""

    centre: float
    sigma: float
    basis: str  # "certified value" | "first N runs (moving range)"
    n: int = 0
    mr_bar: float | None = None

    @property
    def warning(self) -> tuple[float, float]:
        return self.centre - 2 * self.sigma, self.centre + 2 * self.sigma

    @property
    def action(self) -> tuple[float, float]:
        return self.centre - 3 * self.sigma, self.centre + 3 * self.sigma


def limits_from_certified(certified: float, U_certified: float, k: float = 2.0) -> Limits | None:
    """ISO 7870-2 limits for a given standard value: CL = X, sigma = U / k."""
    if not (_ok(certified) and _ok(U_certified)) or U_certified <= 0:
        return None
    return Limits(float(certified), float(U_certified) / float(k), "certified value")


def limits_from_runs(values, n_first: int) -> Limits | None:
    """ISO 7870-2 individuals chart: CL = mean, sigma = MRbar / d2 over the first ``n_first`` values."""
    x = np.asarray([v for v in values if _ok(v)], float)[:n_first]
    if x.size < 2:
        return None
    mr = np.abs(np.diff(x))
    mr_bar = float(mr.mean())
    if mr_bar <= 0:
        return None
    return Limits(float(x.mean()), mr_bar / D2_N2, f"first {x.size} runs (moving range)", int(x.size), mr_bar)


def _ok(v) -> bool:
    return v is not None and isinstance(v, (int, float, np.floating)) and math.isfinite(float(v))


def _run_of(cond: list[bool], length: int, i: int) -> bool:
    return i + 1 >= length and all(cond[i - length + 1 : i + 1])


def _k_of_m(cond: list[bool], k: int, m: int, i: int) -> bool:
    return i + 1 >= m and cond[i] and sum(cond[i - m + 1 : i + 1]) >= k


def rule_violations(values, lim: Limits, rules=tuple(RULE_TEXT)) -> list[list[int]]:
    """For each point, the tests for special causes (numbers) it completes; ``[]`` when none.

    A point completes a test when the pattern the test describes ends at that point.
    """
    x = [float(v) for v in values]
    n = len(x)
    z = [(v - lim.centre) / lim.sigma for v in x]
    up = [v > 0 for v in z]
    down = [v < 0 for v in z]
    out: list[list[int]] = [[] for _ in range(n)]
    diffs = [0.0] + [x[i] - x[i - 1] for i in range(1, n)]
    above2, below2 = [v > 2 for v in z], [v < -2 for v in z]
    above1, below1 = [v > 1 for v in z], [v < -1 for v in z]
    inner, outer = [abs(v) < 1 for v in z], [abs(v) > 1 for v in z]
    for i in range(n):
        hits = []
        if abs(z[i]) > 3:
            hits.append(1)
        if _run_of(up, 9, i) or _run_of(down, 9, i):
            hits.append(2)
        last5 = diffs[i - 4 : i + 1] if i >= 5 else []  # six points: five steps
        if last5 and (all(d > 0 for d in last5) or all(d < 0 for d in last5)):
            hits.append(3)
        if i >= 13 and all(diffs[j] * diffs[j - 1] < 0 for j in range(i - 11, i + 1)):  # 14 points, 13 steps
            hits.append(4)
        if _k_of_m(above2, 2, 3, i) or _k_of_m(below2, 2, 3, i):
            hits.append(5)
        if _k_of_m(above1, 4, 5, i) or _k_of_m(below1, 4, 5, i):
            hits.append(6)
        if _run_of(inner, 15, i):
            hits.append(7)
        if _run_of(outer, 8, i):
            hits.append(8)
        out[i] = [h for h in hits if h in rules]
    return out


@dataclass
class Chart:
    """One chart: the points in run order, the limits and the broken tests per point."""

    title: str
    kind: str  # "check" | "drift"
    key: dict
    points: list[dict] = field(default_factory=list)  # run_id, file, sha256, measured_at, value
    limits: Limits | None = None
    violations: list[list[int]] = field(default_factory=list)

    def frame(self):
        import pandas as pd

        rows = []
        lim = self.limits
        for p, v in zip(self.points, self.violations or [[]] * len(self.points)):
            row = dict(p)
            if lim is not None:
                row.update(centre=lim.centre, lower_action=lim.action[0], lower_warning=lim.warning[0],
                           upper_warning=lim.warning[1], upper_action=lim.action[1])
            row["tests_broken"] = " ".join(str(r) for r in v)
            rows.append(row)
        cols = ["run_id", "measured_at", "file", "sha256", "value", "centre", "lower_action", "lower_warning",
                "upper_warning", "upper_action", "tests_broken"]
        df = pd.DataFrame(rows)
        return df.reindex(columns=[c for c in cols if c in df.columns or c in ("tests_broken",)])


def build_chart(title: str, kind: str, key: dict, points: list[dict], settings: ChartSettings,
                certified: float | None = None, U_certified: float | None = None) -> Chart:
    """Limits (from the certified value or the first N runs, as ``settings`` says) and rule checks."""
    values = [p["value"] for p in points]
    lim = None
    if kind == "check" and settings.limits == "certified":
        lim = limits_from_certified(certified, U_certified, settings.k)
    if lim is None:
        lim = limits_from_runs(values, settings.first_runs)
    viol = rule_violations(values, lim, settings.rules) if lim is not None else [[] for _ in values]
    return Chart(title, kind, key, points, lim, viol)


def draw_chart(chart: Chart, png_path) -> None:
    """PNG of the chart: points, centre line, warning (dashed) and action (solid) limits, broken tests in red."""
    from compquant.plotting import pyplot, save_png

    plt = pyplot()
    fig, ax = plt.subplots(figsize=(8, 3.6))
    x = np.arange(1, len(chart.points) + 1)
    y = np.array([p["value"] for p in chart.points], float)
    ax.plot(x, y, "o-", color="#1f3b73", ms=4, lw=1)
    lim = chart.limits
    if lim is not None:
        ax.axhline(lim.centre, color="k", lw=1, label="centre line")
        for v in lim.warning:
            ax.axhline(v, color="#c77c00", ls="--", lw=1)
        for v in lim.action:
            ax.axhline(v, color="#b0171f", lw=1)
        bad = [i for i, v in enumerate(chart.violations) if v]
        if bad:
            ax.plot(x[bad], y[bad], "o", color="#b0171f", ms=8, mfc="none", mew=1.5, label="test broken")
        ax.set_title(f"{chart.title}  (limits: {lim.basis})", fontsize=9)
    else:
        ax.set_title(f"{chart.title}  (too few runs for limits)", fontsize=9)
    ax.set_xlabel("run (in order of measurement)")
    ax.set_ylabel("mass fraction (g/g)" if chart.kind == "check" else "drift factor")
    ax.grid(alpha=0.3)
    fig.tight_layout()
    save_png(fig, png_path, dpi=110)


__all__ = ["ChartSettings", "parse_chart_section", "Limits", "limits_from_certified", "limits_from_runs",
           "rule_violations", "Chart", "build_chart", "draw_chart", "RULE_TEXT", "D2_N2"]

"""The outcome of a calibration-free analysis: :class:`CFResult` (JSON round-trip).

``CFResult.results_table()`` gives the rows of the results-table contract
(docs/architecture.md, basis ``"cf"``); the rest of the object holds the plasma
conditions (T, nₑ with its method, LTE checks, self-absorption factors per line), the fit
and the Monte Carlo summary.
"""

from __future__ import annotations

import json
from dataclasses import asdict, dataclass, field

import numpy as np
import pandas as pd

from compquant import results as _results
from compquant.fileio import json_ready

SCHEMA = "compquant.cf-result/1"

#: the columns of :meth:`CFResult.results_table`: the results contract's core columns
#: (:data:`compquant.results.CORE_COLUMNS`, declared once with dtype, unit and meaning)
RESULT_COLUMNS = list(_results.CORE_COLUMNS)


def _clean(obj):
    """Make numpy scalars/arrays and non-finite floats JSON-safe (NaN/inf → None)."""
    return json_ready(obj)


@dataclass
class ElementResult:
    element: str
    mass_fraction: float
    u: float
    number_fraction: float
    u_number_fraction: float
    n_lines: int
    lines: list[str]
    flags: list[str] = field(default_factory=list)
    fixed: bool = False
    #: False: no mass fraction is reported (robust-closure rules, failed measurements or an
    #: inconsistent plasma solution); ``reasons`` says why (docs/calibration-free.md §5a)
    determined: bool = True
    reasons: list[str] = field(default_factory=list)
    #: the closure's value before the plasma checks refused it (diagnosis only, never reported)
    uncertified_mass_fraction: float | None = None


@dataclass
class CFResult:
    """Calibration-free result for one sample.  Mass fractions are g/g; U = k·u, k = 2.

    Round-trips through JSON (``to_json`` / ``from_json``, schema ``compquant.cf-result/1``);
    ``results_table()`` gives the rows of the results-table contract (docs/architecture.md,
    basis ``"cf"``).

    Attributes
    ----------
    sample_id : str
    temperature_k, u_temperature_k : float
        Plasma temperature and its standard uncertainty, K.
    electron_density_cm3, u_electron_density_cm3 : float
        Electron density and its standard uncertainty, cm⁻³.
    ne_method : str
        Route of the electron density (``saha_balance``, ``h_alpha_stark_width``,
        ``stark_widths``, ``fixed``); ``ne_estimates`` and ``ne_agreement`` hold every route's
        value and their agreement.
    fit_mode : str
        ``"boltzmann"`` or ``"saha-boltzmann"``.
    elements : list of ElementResult
        Per element: mass and number fractions with ``u``, lines used, flags, whether it is
        determined (and why not).
    lte : dict
        Each LTE criterion (McWhirter, transient, inhomogeneous): checked, passed, value, limit.
    species, lines, excluded_lines : list of dict
        Per-species Boltzmann T; per line the ordinate, fit, residual, self-absorption and
        correction factors and flags; the lines left out, with reasons.
    self_absorption, fit, monte_carlo : dict
        Self-absorption treatment; the fit (slope, χ², p-value, intercepts); the Monte Carlo
        summary.
    one_point : dict or None
        The one-point calibration applied, if any.
    flags, warnings : list of str
    settings : dict
        The ``[cf]`` settings used.
    plasma_consistent, plasma_checks : bool, list of dict
        False when the plasma solution failed a physical check (listed in ``plasma_checks``):
        no mass fraction of the sample is certified (flag ``plasma_inconsistent``).
    rejected_lines, upper_limits : list of dict
        Lines rejected by the robust closure; non-detected lines used as upper limits.
    intensity_basis : str
        Basis of the line intensities (``"energy"``).
    k : float
        Coverage factor, 2.

    See Also
    --------
    analyse_cf : makes it.
    compquant.cflibs.result.results_table : several results as one table.

    References
    ----------
    .. [1] Ciucci et al., Appl. Spectrosc. 53 (1999) 960 (calibration-free LIBS).
    .. [2] Cristoforetti et al., Spectrochim. Acta B 65 (2010) 86 (LTE criteria).
    .. [3] JCGM 100:2008, Evaluation of measurement data -- Guide to the expression of uncertainty
       in measurement (GUM) (``U = 2u``).
    .. [4] compquant documentation: docs/calibration-free.md §9 (results), docs/architecture.md.
    """

    sample_id: str
    temperature_k: float
    u_temperature_k: float
    electron_density_cm3: float
    u_electron_density_cm3: float
    ne_method: str
    fit_mode: str
    elements: list[ElementResult]
    ne_estimates: list[dict] = field(default_factory=list)
    lte: dict = field(default_factory=dict)
    species: list[dict] = field(default_factory=list)
    lines: list[dict] = field(default_factory=list)
    excluded_lines: list[dict] = field(default_factory=list)
    self_absorption: dict = field(default_factory=dict)
    fit: dict = field(default_factory=dict)
    monte_carlo: dict = field(default_factory=dict)
    one_point: dict | None = None
    flags: list[str] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
    settings: dict = field(default_factory=dict)
    #: False when the plasma solution failed a physical check (``plasma_checks``): no mass
    #: fraction of the sample is certified (flag ``plasma_inconsistent``)
    plasma_consistent: bool = True
    plasma_checks: list[dict] = field(default_factory=list)
    #: lines rejected by the robust closure (outliers), with reasons
    rejected_lines: list[dict] = field(default_factory=list)
    #: non-detected lines used as upper limits: prediction, limit, contradicted
    upper_limits: list[dict] = field(default_factory=list)
    #: agreement of the electron-density routes (``ne_estimates``)
    ne_agreement: dict = field(default_factory=dict)
    intensity_basis: str = "energy"
    k: float = 2.0
    schema: str = SCHEMA

    # -- convenience ---------------------------------------------------------------------
    def mass_fractions(self) -> dict[str, float]:
        return {e.element: e.mass_fraction for e in self.elements}

    def element(self, symbol: str) -> ElementResult:
        for e in self.elements:
            if e.element == symbol:
                return e
        raise KeyError(symbol)

    def not_determined(self) -> dict[str, list[str]]:
        """Elements with no reported mass fraction → reasons (for the release rule)."""
        return {e.element: list(e.reasons) for e in self.elements if not e.determined}

    def results_table(self) -> pd.DataFrame:
        """Rows of the results-table contract (basis ``"cf"``; lod/loq not defined → NaN).

        Elements that are not determined have NaN mass fraction and u and the flag
        ``not_determined``."""
        rows = []
        for e in self.elements:
            fl = list(dict.fromkeys([*self.flags, *e.flags]))
            w, u = (e.mass_fraction, e.u) if e.determined else (np.nan, np.nan)
            rows.append({
                "sample_id": self.sample_id, "element": e.element,
                "mass_fraction": w, "u": u, "U": self.k * u, "k": self.k,
                "lod": np.nan, "loq": np.nan, "below_lod": False, "flags": ";".join(fl),
                "basis": "cf", "line_id": ";".join(e.lines),
            })
        return pd.DataFrame(rows, columns=RESULT_COLUMNS)

    def to_frame(self) -> pd.DataFrame:
        """The results as the declared contract (:mod:`compquant.results`; ``role`` empty, ``dof`` NaN)."""
        return _results.to_frame(self.results_table())

    def summary(self) -> str:
        """A plain-text summary: plasma temperature and electron density, then one line per element."""
        info = {
            "basis": "cf (calibration-free)",
            "sample": self.sample_id,
            "temperature / K": f"{self.temperature_k:.0f} +- {self.k * self.u_temperature_k:.0f} (U, k = {self.k:g})",
            "electron density / cm-3": f"{self.electron_density_cm3:.3e} ({self.ne_method})",
            "fit": self.fit_mode,
            "plasma consistent": "yes" if self.plasma_consistent else "NO",
            "flags": ";".join(self.flags) or "-",
        }
        return _results.summary_text(self.to_frame(), "Calibration-free result (compquant.cflibs.analyse_cf)", info)

    def summary_table(self) -> pd.DataFrame:
        """One row per species: lines used, T, nₑ, concentration, U, flags (for the CLI)."""
        rows = []
        conc = {e.element: e for e in self.elements}
        for sp in self.species:
            e = conc.get(sp["element"])
            rows.append({
                "sample_id": self.sample_id, "species": sp["species"], "n_lines": sp["n_lines"],
                "lines": ";".join(sp["lines"]), "T_K": self.temperature_k,
                "u_T_K": self.u_temperature_k, "T_species_K": sp.get("temperature_k"),
                "ne_cm3": self.electron_density_cm3, "u_ne_cm3": self.u_electron_density_cm3,
                "ne_method": self.ne_method,
                "mass_fraction": e.mass_fraction if e and e.determined else np.nan,
                "U": self.k * e.u if e and e.determined else np.nan,
                "flags": ";".join(dict.fromkeys([*self.flags, *(e.flags if e else [])])),
                "reason": "; ".join(e.reasons) if e else "",
            })
        done = {sp["element"] for sp in self.species}
        for e in self.elements:  # elements with no line in the fit: one row with the reason
            if e.element in done:
                continue
            rows.append({"sample_id": self.sample_id, "species": e.element, "n_lines": 0, "lines": "",
                         "T_K": self.temperature_k, "u_T_K": self.u_temperature_k, "T_species_K": np.nan,
                         "ne_cm3": self.electron_density_cm3, "u_ne_cm3": self.u_electron_density_cm3,
                         "ne_method": self.ne_method,
                         "mass_fraction": e.mass_fraction if e.determined else np.nan,
                         "U": self.k * e.u if e.determined else np.nan,
                         "flags": ";".join(dict.fromkeys([*self.flags, *e.flags])),
                         "reason": "; ".join(e.reasons)})
        return pd.DataFrame(rows)

    # -- serialisation -------------------------------------------------------------------
    def to_dict(self) -> dict:
        return _clean(asdict(self))

    def to_json(self, indent: int | None = 2) -> str:
        return json.dumps(self.to_dict(), indent=indent, ensure_ascii=False, allow_nan=False)

    @classmethod
    def from_dict(cls, d: dict) -> CFResult:
        d = dict(d)
        d["elements"] = [ElementResult(**{k: (np.nan if v is None and k in ("mass_fraction", "u",
                          "number_fraction", "u_number_fraction") else v) for k, v in e.items()})
                         for e in d.get("elements", [])]
        for key in ("temperature_k", "u_temperature_k", "electron_density_cm3", "u_electron_density_cm3"):
            if d.get(key) is None:
                d[key] = np.nan
        return cls(**d)

    @classmethod
    def from_json(cls, text: str) -> CFResult:
        return cls.from_dict(json.loads(text))


def results_table(results: list[CFResult]) -> pd.DataFrame:
    """Concatenate the results tables of several samples."""
    if not results:
        return pd.DataFrame(columns=RESULT_COLUMNS)
    return pd.concat([r.results_table() for r in results], ignore_index=True)


__all__ = ["CFResult", "ElementResult", "RESULT_COLUMNS", "SCHEMA", "results_table"]

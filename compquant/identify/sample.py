"""Identification of the samples of a run: mean spectrum in, element list with status out.

These are the functions the CLI (``compquant identify``) and the certificate
flow call; the physics and the rules live in :mod:`compquant.identify.core`.
"""

from __future__ import annotations

import pandas as pd

from compquant.errors import InputError
from compquant.identify.core import Identification, identify_spectrum
from compquant.identify.interference import interference_map
from compquant.identify.settings import IdentifySettings, settings_from_method


def default_method():
    """The method used when none is given: default preprocessing (dark, response, shot QC,
    SNIP baseline), no lines to measure, default ``[identify]`` settings."""
    from compquant.method import MeasureConfig, Method, PreprocessConfig

    return Method(id="identify-default", version="1", technique="other",
                  description="default preprocessing for qualitative analysis", preprocess=PreprocessConfig(),
                  measure=MeasureConfig(), lines=[], sections={})


def _resolving_power(run) -> float | None:
    val = (run.instrument or {}).get("resolving_power")
    try:
        val = float(val)
    except (TypeError, ValueError):
        return None
    return val if 0 < val < float("inf") else None  # NaN, inf, 0 and negative: not stated


def identify_sample(run, sample_id: str, method=None, *, settings: IdentifySettings | None = None,
                    line_list: pd.DataFrame | None = None) -> Identification:
    """Identify the elements in one sample of an open :class:`~compquant.run.Run`.

    The preprocessed mean spectrum comes from :func:`compquant.lines.mean_spectrum`
    with ``method`` (default :func:`default_method`); settings from the method's
    ``[identify]`` table unless ``settings`` is given; the resolving power from
    ``run.instrument["resolving_power"]`` when the settings do not give one.
    """
    from compquant.lines import mean_spectrum

    method = method if method is not None else default_method()
    if sample_id not in set(run.samples["sample_id"]):
        raise InputError(f"no sample {sample_id!r} in this run", where=str(run.path),
                         fix="list the samples with 'compquant inspect'")
    st = settings if settings is not None else settings_from_method(method)
    wl, mean, _info = mean_spectrum(run, method, sample_id)
    return identify_spectrum(wl, mean, line_list, settings=st, resolving_power=_resolving_power(run),
                             medium=run.medium)


def detected_elements(run, sample_id: str, method=None, *, settings: IdentifySettings | None = None,
                      line_list: pd.DataFrame | None = None, include_possible: bool = True) -> pd.DataFrame:
    """Elements found in a sample: ``element, status, score, species, lines_found, lines_expected,
    best_lines`` (see :func:`compquant.identify.core.element_summary`), detected first.

    Rows with status *not detected* are dropped; *possible* ones too unless ``include_possible``.
    This is the list the certificate uses for "elements detected but not quantified".
    """
    ident = identify_sample(run, sample_id, method, settings=settings, line_list=line_list)
    el = ident.elements()
    keep = el["status"] == "detected"
    if include_possible:
        keep |= el["status"] == "possible"
    return el[keep].reset_index(drop=True)


def elements_not_quantified(elements: pd.DataFrame, quantified) -> pd.DataFrame:
    """Rows of ``elements`` (from :func:`detected_elements`) whose element is not among ``quantified``
    (an iterable of symbols, e.g. the results table's ``element`` column)."""
    q = {str(x) for x in quantified}
    return elements[~elements["element"].isin(q)].reset_index(drop=True)


def detected_not_quantified(wavelength, mean_spectrum, quantified, method=None, *, resolving_power=None,
                            medium: str = "air", line_list: pd.DataFrame | None = None) -> list[str]:
    """Elements *detected* (status "detected", not "possible") in a preprocessed mean spectrum that
    are not among ``quantified``: the certificate's "elements detected but not quantified".

    The whole line database is searched (not only the method's lines), so an element the method
    does not measure is still reported. Settings come from the method's ``[identify]`` table.
    """
    st = settings_from_method(method) if method is not None else IdentifySettings()
    ident = identify_spectrum(wavelength, mean_spectrum, line_list, settings=st, resolving_power=resolving_power,
                              medium=medium)
    el = ident.elements()
    found = el.loc[el["status"] == "detected", "element"].astype(str)
    q = {str(x) for x in quantified}
    return sorted({e for e in found if e not in q})


def identify_table(ident: Identification, sample_id: str) -> pd.DataFrame:
    """The species table of one identification with ``sample_id`` first and the run-level context."""
    t = ident.species.copy()
    t.insert(0, "sample_id", sample_id)
    t["resolving_power"] = ident.resolving_power
    t["temperature_fitted"] = ident.temperature_fitted
    return t


def sample_interference(ident: Identification, method, sample_id: str) -> pd.DataFrame:
    """Interference map of the method's analyte lines in one sample, ``sample_id`` first."""
    imap = interference_map(ident, method.lines)
    imap.insert(0, "sample_id", sample_id)
    return imap


__all__ = ["default_method", "detected_elements", "detected_not_quantified", "elements_not_quantified",
           "identify_sample", "identify_table",
           "sample_interference"]

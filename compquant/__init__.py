"""compquant: quantitative LIBS / spark-OES composition analysis for lab samples.

The flow is one-directional::

    run -> preprocess -> lines -> calibrate (then quantify) | cflibs -> report -> record

Each step is a plain function over numpy arrays and pandas tables, importable from
here (``from compquant import Run, load_method, measure_run, calibrate, quantify``;
the list is ``__all__``); the command line (``compquant ...``) is a thin shell over it.
"""

from compquant.errors import CompquantError

__version__ = "0.1.0"

__all__ = ["CompquantError", "__version__"]

# --- public API (issue 19) ----------------------------------------------------------------
# Everything a notebook needs for the whole flow, imported on first use (PEP 562) so that
# ``import compquant`` stays cheap (the CLI's ``--help`` imports only this file and errors).
# ``calibrate`` and ``analyse`` are also the names of the subpackage / module holding them:
# ``compquant.calibrate`` and ``compquant.analyse`` are those modules, made callable, so
# ``from compquant import calibrate; calibrate(...)`` calls the function and
# ``compquant.calibrate.fit_curve`` still reaches the package.
import importlib as _importlib
import sys as _sys
import types as _types

_PUBLIC = {
    # run files (docs/run-format.md)
    "Run": "compquant.run",
    "write_run": "compquant.run",
    "validate_run": "compquant.run",
    # method file (docs/method-file.md)
    "Method": "compquant.method",
    "load_method": "compquant.method",
    "method_from_dict": "compquant.method",
    # line measurement
    "LineMeasurement": "compquant.lines",
    "measure_run": "compquant.lines",
    "mean_spectrum": "compquant.lines",
    # qualitative analysis
    "identify_spectrum": "compquant.identify",
    # calibration from certified standards, and its apply half
    "load_standards": "compquant.calibrate",
    "parse_calibration_section": "compquant.calibrate",
    "Calibration": "compquant.calibrate",
    "quantify": "compquant.calibrate",
    "QuantifyResult": "compquant.calibrate",
    # calibration-free analysis
    "CFSettings": "compquant.cflibs",
    "CFResult": "compquant.cflibs",
    "analyse_cf": "compquant.cflibs",
    "analyse_cf_samples": "compquant.cflibs",
    # the whole flow to certificates
    "AnalysisOutput": "compquant.analyse",
    # simulated runs
    "load_scenario": "compquant.simulate",
    "simulate_run": "compquant.simulate",
}
#: public functions that share their name with the module holding them
_CALLABLE_MODULES = ("analyse", "calibrate")


class _CallableModule(_types.ModuleType):
    """A module that, called, calls its function of the same name (``compquant.analyse(...)``
    is ``compquant.analyse.analyse(...)``)."""

    def __call__(self, *args, **kwargs):
        return getattr(self, self.__name__.rpartition(".")[2])(*args, **kwargs)


class _ModuleFunction:
    """``compquant.<name>``: the module ``compquant.<name>``, made callable, whichever was
    imported first (the import system's own assignment of the submodule is ignored)."""

    def __set_name__(self, owner, name):
        self.name = name

    def __get__(self, obj, objtype=None):
        mod = _importlib.import_module(f"{__name__}.{self.name}")
        if not isinstance(mod, _CallableModule):
            mod.__class__ = _CallableModule
        return mod

    def __set__(self, obj, value):
        pass  # the submodule itself, set by the import system: __get__ returns it anyway


class _Package(_types.ModuleType):
    analyse = _ModuleFunction()
    calibrate = _ModuleFunction()


_sys.modules[__name__].__class__ = _Package


def __getattr__(name: str):
    if name in _PUBLIC:
        value = getattr(_importlib.import_module(_PUBLIC[name]), name)
        globals()[name] = value  # imported once
        return value
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def __dir__():
    return sorted(set(globals()) | set(_PUBLIC) | set(_CALLABLE_MODULES))


__all__ += sorted(_PUBLIC) + list(_CALLABLE_MODULES)

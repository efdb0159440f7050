"""tumble: principal-axis or tumbling? Asteroid light-curve analysis.

From Python, in three lines (an astropy Table, a pandas DataFrame or a file)::

    import tumble
    lc = tumble.read_lightcurve(table)        # or "night1.csv", a DataFrame, ...
    verdict = tumble.screen(lc)                # fast; tumble.classify(lc) for the full route

The public functions, imported on first use so that ``import tumble`` (and
``tumble --help``) stay cheap:

- :func:`read_lightcurve` - photometry from files or in-memory tables (:mod:`tumble.photometry`);
- :func:`classify` - the full classification (:func:`tumble.classify.classify`);
- :func:`screen` - the fast screen (:func:`tumble.classify.screen`);
- :func:`scan` - the multi-harmonic period scan (:func:`tumble.periodogram.fourier_scan`);
- :func:`relax` - the damping-time estimate (:func:`tumble.damping.estimate_damping`);
- :func:`survey` - a whole survey (:func:`tumble.api.survey`).

``tumble.classify`` and ``tumble.survey`` are also the sub-modules of those names;
calling them calls their main function, so both ``tumble.classify(lc)`` and
``tumble.classify.classify(lc)`` work.

Results are scientific estimates for research use.
"""

from __future__ import annotations

import importlib
import sys
import types

__version__ = "0.1.0.dev0"

#: Public name -> (module, attribute), imported on first access (keeps ``import tumble`` light).
_LAZY: dict[str, tuple[str, str]] = {
    "read_lightcurve": ("tumble.photometry", "read_lightcurve"),
    "LightCurve": ("tumble.photometry", "LightCurve"),
    "screen": ("tumble.classify", "screen"),
    "scan": ("tumble.periodogram", "fourier_scan"),
    "two_period_scan": ("tumble.periodogram", "two_period_scan"),
    "relax": ("tumble.damping", "estimate_damping"),
}

#: Sub-modules that are also the public function of their name: module -> (module, attribute) called.
_CALLABLE_SUBMODULES: dict[str, tuple[str, str]] = {
    "classify": ("tumble.classify", "classify"),
    "survey": ("tumble.api", "survey"),
}

__all__ = ["__version__", "read_lightcurve", "classify", "screen", "scan", "relax", "survey", "LightCurve",
           "two_period_scan"]


class _CallableModule(types.ModuleType):
    """A sub-module that can be called: ``tumble.classify(lc)`` is ``tumble.classify.classify(lc)``."""

    def __call__(self, *args, **kwargs):
        module, attr = _CALLABLE_SUBMODULES[self.__name__.rpartition(".")[2]]
        return getattr(importlib.import_module(module), attr)(*args, **kwargs)


class _Package(types.ModuleType):
    """The ``tumble`` package: makes the callable sub-modules callable when Python attaches them."""

    def __setattr__(self, name, value):
        if name in _CALLABLE_SUBMODULES and type(value) is types.ModuleType:
            value.__class__ = _CallableModule
        super().__setattr__(name, value)


def __getattr__(name: str):
    if name in _LAZY:
        module, attr = _LAZY[name]
        value = getattr(importlib.import_module(module), attr)
        globals()[name] = value
        return value
    if name in _CALLABLE_SUBMODULES:
        return importlib.import_module(f"{__name__}.{name}")  # the import attaches it (callable)
    raise AttributeError(f"module 'tumble' has no attribute '{name}'")


def __dir__():
    return sorted(set(globals()) | set(_LAZY) | set(_CALLABLE_SUBMODULES))


sys.modules[__name__].__class__ = _Package

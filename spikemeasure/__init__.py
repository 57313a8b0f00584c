"""spikemeasure: measure action potentials in current-clamp recordings.

``import spikemeasure as sm`` gives the Python API (:mod:`spikemeasure.api`): ``sm.measure``,
``sm.measure_trace``, ``sm.read_recording``, ``sm.Table``, ``sm.Results`` and
``sm.InvalidSettingError``. They are imported on first use, so that importing the package (as
the command line does) stays light.
"""
__version__ = "0.2.0"

_API_NAMES = ("measure", "measure_trace", "read_recording", "Table", "Results")
__all__ = list(_API_NAMES) + ["InvalidSettingError", "SpikemeasureError", "__version__"]


def __getattr__(name: str):
    if name in _API_NAMES:
        from . import api
        return getattr(api, name)
    if name in ("InvalidSettingError", "SpikemeasureError"):
        from . import errors
        return getattr(errors, name)
    raise AttributeError(f"module 'spikemeasure' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))

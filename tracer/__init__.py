"""tracer: electrostatic ion and electron optics.

The public API (README, "From Python"; docs/reference.md).  Names are imported lazily, on first use, so that
``import tracer`` and the command line start quickly and the numerical kernels
are compiled (or loaded from numba's cache) only when they are needed.
"""

from importlib import import_module

__version__ = "0.1.0"

_PUBLIC = {
    "ConfigError": "tracer.schema",
    "Setup": "tracer.schema",
    "load": "tracer.config",
    "loads": "tracer.config",
    "Species": "tracer.species",
    "BasisMaps": "tracer.fieldmap",
    "PotentialMap": "tracer.fieldmap",
    "solve": "tracer.pipeline",
    "trace": "tracer.beam",
    "BeamRun": "tracer.beam",
    "run": "tracer.pipeline",
    "RunResult": "tracer.pipeline",
    "paraxial": "tracer.optics",
    "LensProperties": "tracer.optics",
    "OpticsError": "tracer.optics",
    "gun": "tracer.guns",
    "GunResult": "tracer.guns",
    "scan": "tracer.scans",
    "ScanResult": "tracer.scans",
    "read_scan": "tracer.scans",
    "read_result": "tracer.store.result_file",
    "ResultFile": "tracer.store.result_file",
    "tune": "tracer.tuning",
    "TuneResult": "tracer.tuning",
}

__all__ = sorted(_PUBLIC) + ["__version__"]


def __getattr__(name):
    module = _PUBLIC.get(name)
    if module is None:
        raise AttributeError(f"module 'tracer' has no attribute {name!r}")
    value = getattr(import_module(module), name)
    globals()[name] = value
    return value


def __dir__():
    return __all__

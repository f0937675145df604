"""The public API of DESIGN §6: the names exist and stay what they are after every module loads."""

import importlib
import pkgutil

import tracer

FUNCTIONS = ("load", "loads", "solve", "trace", "run", "scan", "tune", "paraxial", "gun")
CLASSES = ("ConfigError", "Setup", "Species", "BasisMaps", "PotentialMap", "BeamRun", "RunResult",
           "ScanResult", "TuneResult", "LensProperties", "GunResult")


def test_public_names_survive_importing_every_module():
    """A submodule named like a public function would replace it on import; none may."""
    for info in pkgutil.walk_packages(tracer.__path__, "tracer."):
        if info.name != "tracer.__main__":
            importlib.import_module(info.name)
    for name in FUNCTIONS:
        assert callable(getattr(tracer, name)) and not isinstance(getattr(tracer, name), type(tracer)), name
    for name in CLASSES:
        assert isinstance(getattr(tracer, name), type), name
    assert set(FUNCTIONS + CLASSES) <= set(dir(tracer))

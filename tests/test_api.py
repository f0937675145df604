"""The public API (README, "From Python"): the names exist and stay what they are after every module loads."""

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


def _imports(path, package, modules):
    """The tracer modules a source file imports, at its top or inside functions."""
    import ast

    found = set()
    for node in ast.walk(ast.parse(path.read_text())):
        if isinstance(node, ast.ImportFrom):
            base = package.rsplit(".", node.level - 1)[0] if node.level else ""
            target = ".".join(p for p in (base, node.module) if p)
            # ``from package import module`` imports the module, not a circle through the package
            found |= {f"{target}.{a.name}" if f"{target}.{a.name}" in modules else target for a in node.names}
        elif isinstance(node, ast.Import):
            found |= {a.name for a in node.names}
    return found & set(modules)


def test_no_module_imports_another_that_imports_it_back():
    """No import circle in the package, counting imports inside functions (which could hide one)."""
    from pathlib import Path

    root = Path(tracer.__file__).parent
    modules = {}
    for path in root.rglob("*.py"):
        parts = path.relative_to(root.parent).with_suffix("").parts
        modules[".".join(parts[:-1] if parts[-1] == "__init__" else parts)] = path
    graph = {name: _imports(path, name if path.name == "__init__.py" else name.rpartition(".")[0], modules)
             - {name, "tracer"} for name, path in modules.items()}

    def reaches(start, goal, seen):
        return any(m == goal or (m not in seen and not seen.add(m) and reaches(m, goal, seen))
                   for m in graph[start])

    assert sorted(name for name in graph if reaches(name, name, set())) == []


def test_public_functions_are_annotated_with_types_that_resolve():
    """Every parameter and the return of the public functions carries a type (py.typed ships them);
    names imported only for type checkers resolve against the public classes."""
    import inspect
    import typing

    schema = importlib.import_module("tracer.schema")
    public = {name: getattr(tracer, name) for name in CLASSES} | {"Beam": schema.Beam, "Plane": schema.Plane}
    for name in FUNCTIONS:
        func = getattr(tracer, name)
        hints = typing.get_type_hints(func, localns=public)
        params = set(inspect.signature(func).parameters)
        assert params - set(hints) == set(), (name, params - set(hints))
        assert "return" in hints, name
    assert typing.get_type_hints(tracer.run, localns=public)["return"] is tracer.RunResult
    assert typing.get_type_hints(tracer.solve, localns=public)["return"] is tracer.BasisMaps

"""The architecture rules of DEVELOPERS.md, checked on the source tree.

* ``ionbal/core/`` imports only numpy, scipy, numba and the standard library's computing modules:
  no astropy, no h5py, nothing that reads or writes data files (AST scan), and importing the core
  on its own loads neither astropy nor h5py (fresh subprocess, package ``__init__`` bypassed).
* numba's compilation settings (jit decorators, cache, parallel, fastmath, the switch that turns
  the JIT off) appear only in ``ionbal/core/config.py``.
* Imports point down the layers: core <- data <- API <- io <- grid/column <- cli; the data layer
  takes only the constants and the kernels' argument bundle from the core.
* No import cycle anywhere in ``ionbal/`` (also between modules of one layer, and through imports
  inside functions); no module longer than 600 lines; every subpackage is in pyproject.toml.
* The JIT-off switch works: ``IONBAL_DISABLE_JIT=1`` runs the kernels as plain Python with the same
  answers (1e-12).
"""

from __future__ import annotations

import ast
import json
import os
import re
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pytest

import ionbal

PKG = Path(ionbal.__file__).resolve().parent
CORE = PKG / "core"

#: top-level modules the core may import
CORE_ALLOWED = {
    "__future__", "numpy", "scipy", "numba", "math", "os", "typing", "dataclasses", "functools",
    # config.py keeps numba's on-disk cache consistent with the core sources (hash of the files)
    "glob", "hashlib",
    # bundle.py: the kernels' argument bundle is a named tuple
    "collections",
}
#: modules that do data I/O or belong to the upper layers: never in the core
CORE_FORBIDDEN = {"astropy", "h5py", "netCDF4", "h5netcdf", "xarray", "dask", "pandas", "io", "json", "csv",
                  "pickle", "shelve", "sqlite3", "zipfile", "tarfile", "urllib", "requests", "pathlib"}

#: layer of every module of the package (DEVELOPERS.md, "Layout"); storage (io) sits below the
#: grid runner and the model columns, which both write through it
LAYERS = {
    "core": 1,
    "data": 2,
    "api": 3, "validity": 3, "dense": 3, "chemistry": 3, "_problems": 3, "_version": 3, "__init__": 3,
    "quantities": 3, "thermo": 3, "result": 3, "result_table": 3, "validate": 3, "selection": 3,
    "io": 4,
    "grid": 4.5, "column": 4.5, "plot": 4.5,
    "cli": 5, "plot_cli": 5, "state_report": 5,
    "_launch": 6, "__main__": 6,
}
#: no module of the package may be longer than this (lines)
MAX_MODULE_LINES = 600


def _py_files(root: Path):
    # an installed package also holds ionbal/tables/ (the generated data files and the script that
    # writes them, shipped as package data): that is not a layer of the code, so it is left out
    tables = PKG / "tables"
    return sorted(p for p in root.rglob("*.py")
                  if "__pycache__" not in p.parts and not p.is_relative_to(tables))


def _imports(path: Path):
    """``(module, level, names, lineno)`` for every import statement in a file (also inside functions)."""
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    out = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            for a in node.names:
                out.append((a.name, 0, (), node.lineno))
        elif isinstance(node, ast.ImportFrom):
            out.append((node.module or "", node.level, tuple(a.name for a in node.names), node.lineno))
    return out


def _resolve(path: Path, module: str, level: int, names) -> list[str]:
    """Absolute dotted names (``ionbal.x.y``) an import refers to."""
    if level == 0:
        return [module]
    rel = path.relative_to(PKG.parent).with_suffix("")
    package = list(rel.parts[:-1])  # the package holding the file (for __init__.py: the package itself)
    base = package[: len(package) - (level - 1)]
    target = ".".join(base + ([module] if module else []))
    if module:
        return [target]
    return [f"{target}.{n}" for n in names]


def _layer_of(dotted: str) -> int | None:
    parts = dotted.split(".")
    if parts[0] != "ionbal":
        return None
    if len(parts) == 1:
        return LAYERS["__init__"]
    head = parts[1]
    if head not in LAYERS and not (PKG / head).is_dir() and not (PKG / f"{head}.py").is_file():
        return LAYERS["__init__"]  # a name taken from the package itself, e.g. ``from . import __version__``
    return LAYERS.get(head)


def _module_name(path: Path) -> str:
    rel = path.relative_to(PKG.parent).with_suffix("")
    return ".".join(rel.parts)


# ----------------------------------------------------------------------------------------------
# The core imports nothing from above and does no data I/O
# ----------------------------------------------------------------------------------------------

@pytest.mark.parametrize("path", _py_files(CORE), ids=lambda p: p.name)
def test_core_imports_only_computing_modules(path):
    for module, level, names, line in _imports(path):
        for dotted in _resolve(path, module, level, names):
            top = dotted.split(".")[0]
            where = f"{path.name}:{line} imports {dotted}"
            if top == "ionbal":
                assert dotted.startswith("ionbal.core"), where
                continue
            assert top not in CORE_FORBIDDEN, where
            assert top in CORE_ALLOWED, where


def test_core_has_no_file_reading_calls():
    # data files are read by the data layer; the core may only touch numba's cache (config.py)
    for path in _py_files(CORE):
        src = path.read_text(encoding="utf-8")
        if path.name == "config.py":
            continue
        for pattern in (r"\bopen\(", r"np\.load", r"np\.save", r"loadtxt", r"genfromtxt", r"fromfile", r"tofile"):
            assert not re.search(pattern, src), f"{path.name}: {pattern}"


def test_importing_the_core_alone_loads_no_astropy_or_h5py():
    code = textwrap.dedent(f"""
        import importlib.util, json, sys, types
        pkg = types.ModuleType("ionbal")
        pkg.__path__ = [{str(PKG)!r}]
        sys.modules["ionbal"] = pkg          # bypass ionbal/__init__.py (it pulls in the API)
        import ionbal.core, ionbal.core.solver, ionbal.core.saha, ionbal.core.status, ionbal.core.constants
        import numpy as np
        from ionbal.core.solver import solve_many
        loaded = sorted(m for m in sys.modules if m.split(".")[0] in
                        ("astropy", "h5py", "netCDF4", "h5netcdf", "xarray", "dask", "pandas"))
        upper = sorted(m for m in sys.modules if m.startswith("ionbal.") and not m.startswith("ionbal.core"))
        print(json.dumps({{"loaded": loaded, "upper": upper}}))
    """)
    env = dict(os.environ)
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, timeout=600)
    assert out.returncode == 0, out.stderr
    info = json.loads(out.stdout.strip().splitlines()[-1])
    assert info["loaded"] == [], info
    assert info["upper"] == [], info


# ----------------------------------------------------------------------------------------------
# numba settings live in core/config.py only
# ----------------------------------------------------------------------------------------------

NUMBA_SETTINGS = [
    r"numba\.jit\s*\(", r"\bnjit\b", r"@jit\s*\(", r"@pjit\s*\(", r"numba\.(vectorize|guvectorize|cfunc|stencil)",
    r"from\s+numba\s+import", r"numba\.prange", r"cache\s*=\s*True", r"parallel\s*=\s*True",
    r"fastmath\s*=", r"nopython\s*=", r"NUMBA_DISABLE_JIT", r"IONBAL_DISABLE_JIT", r"IONBAL_NUMBA_CACHE",
    r"IONBAL_PARALLEL", r"IONBAL_FASTMATH", r"numba\.config\.DISABLE_JIT",
]


def _code_only(src: str) -> str:
    """The source without comments and string literals (docstrings may mention the settings)."""
    import io
    import tokenize

    out = []
    for tok in tokenize.generate_tokens(io.StringIO(src).readline):
        if tok.type in (tokenize.COMMENT, tokenize.STRING):
            continue
        out.append(tok.string)
    return " ".join(out)


@pytest.mark.parametrize("path", [p for p in _py_files(PKG) if p != CORE / "config.py"],
                         ids=lambda p: str(p.relative_to(PKG)))
def test_numba_settings_only_in_config(path):
    code = _code_only(path.read_text(encoding="utf-8"))
    for pattern in NUMBA_SETTINGS:
        assert not re.search(pattern, code), f"{path.relative_to(PKG)}: {pattern}"


def test_tests_use_the_config_decorators_too():
    here = Path(__file__).resolve().parent
    for path in _py_files(here):
        if path.name == "test_layers.py":
            continue
        code = _code_only(path.read_text(encoding="utf-8"))
        for pattern in (r"numba\.jit\s*\(", r"\bnjit\b", r"from\s+numba\s+import", r"cache\s*=\s*True",
                        r"parallel\s*=\s*True"):
            assert not re.search(pattern, code), f"tests/{path.name}: {pattern}"


def test_every_kernel_goes_through_the_config_decorators():
    # every function decorated in the core uses jit or pjit from config, without options
    for path in _py_files(CORE):
        if path.name == "config.py":
            continue
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            if isinstance(node, ast.FunctionDef):
                for d in node.decorator_list:
                    name = d.id if isinstance(d, ast.Name) else ast.unparse(d)
                    assert name in ("jit", "pjit"), f"{path.name}:{node.name} decorated with {name}"


# ----------------------------------------------------------------------------------------------
# Imports point down the layers
# ----------------------------------------------------------------------------------------------

def _package_modules():
    return _py_files(PKG)


@pytest.mark.parametrize("path", _package_modules(), ids=lambda p: str(p.relative_to(PKG)))
def test_imports_point_down_the_layers(path):
    me = _module_name(path)
    my_layer = _layer_of(me)
    assert my_layer is not None, f"{me} has no layer in LAYERS; add it (DEVELOPERS.md, Layout)"
    for module, level, names, line in _imports(path):
        for dotted in _resolve(path, module, level, names):
            target = _layer_of(dotted)
            if target is None:
                if dotted.split(".")[0] == "ionbal":
                    pytest.fail(f"{me}:{line} imports {dotted}, which has no layer")
                continue
            assert target <= my_layer, f"{me} (layer {my_layer}):{line} imports {dotted} (layer {target})"
            if my_layer == 2 and target == 1:
                assert dotted.split(".")[:3] in (["ionbal", "core", "constants"], ["ionbal", "core", "bundle"],
                                               ["ionbal", "core", "molecules"]), \
                    f"{me}:{line}: the data layer takes only the constants and the argument bundles from the core, not {dotted}"


@pytest.mark.parametrize("path", _py_files(PKG / "data"), ids=lambda p: p.name)
def test_data_layer_imports_astropy_only_lazily(path):
    tree = ast.parse(path.read_text(encoding="utf-8"))
    for node in tree.body:  # module level only
        if isinstance(node, (ast.Import, ast.ImportFrom)):
            mods = [a.name for a in node.names] if isinstance(node, ast.Import) else [node.module or ""]
            for m in mods:
                assert not m.startswith(("astropy", "h5py")), f"{path.name}:{node.lineno} imports {m} at load time"


def _module_of(dotted: str) -> str | None:
    """The module (file) an imported dotted name lives in: ``ionbal.io.atomic.atomic_output`` -> ``ionbal.io.atomic``."""
    parts = dotted.split(".")
    while parts:
        rel = Path(*parts[1:]) if len(parts) > 1 else Path()
        if len(parts) > 1 and (PKG / rel).with_suffix(".py").is_file():
            return ".".join(parts)
        if (PKG / rel / "__init__.py").is_file():
            return ".".join(parts)
        parts = parts[:-1]
    return None


def _import_graph() -> dict[str, set[str]]:
    """module -> modules of the package it imports (module level and inside functions)."""
    graph = {}
    for path in _py_files(PKG):
        me = _module_name(path)
        me = me[: -len(".__init__")] if me.endswith(".__init__") else me
        targets = set()
        for module, level, names, _ in _imports(path):
            for dotted in _resolve(path, module, level, names):
                if dotted.split(".")[0] != "ionbal":
                    continue
                mod = _module_of(dotted)
                if mod is not None and mod != me:
                    targets.add(mod)
        graph[me] = targets
    return graph


def _cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected components with more than one module (Tarjan), each as a sorted list."""
    index, low, stack, on, out = {}, {}, [], set(), []
    counter = [0]

    def visit(v):
        index[v] = low[v] = counter[0]
        counter[0] += 1
        stack.append(v)
        on.add(v)
        for w in sorted(graph.get(v, ())):
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = []
            while True:
                w = stack.pop()
                on.discard(w)
                comp.append(w)
                if w == v:
                    break
            if len(comp) > 1:
                out.append(sorted(comp))

    for v in sorted(graph):
        if v not in index:
            visit(v)
    return out


def test_no_import_cycle_anywhere():
    # same-layer loops pass the layer check (target <= my layer); this catches them
    cycles = _cycles(_import_graph())
    assert cycles == [], "import cycles: " + "; ".join(" <-> ".join(c) for c in cycles)


def test_the_cycle_finder_itself():
    assert _cycles({"a": {"b"}, "b": {"c"}, "c": {"a"}, "d": {"a"}}) == [["a", "b", "c"]]
    assert _cycles({"a": {"b"}, "b": set()}) == []
    assert _module_of("ionbal.io.atomic.atomic_output") == "ionbal.io.atomic"
    assert _module_of("ionbal.__version__") == "ionbal"
    assert _module_of("ionbal.grid") == "ionbal.grid"
    g = _import_graph()
    assert "ionbal.core.solver" in g["ionbal.api"]  # the graph is not vacuous


@pytest.mark.parametrize("path", _py_files(PKG), ids=lambda p: str(p.relative_to(PKG)))
def test_no_module_is_too_long(path):
    n = len(path.read_text(encoding="utf-8").splitlines())
    assert n <= MAX_MODULE_LINES, f"{path.relative_to(PKG)} has {n} lines (at most {MAX_MODULE_LINES}); split it"


def test_every_subpackage_is_installed():
    # a non-editable install ships only the packages pyproject.toml lists
    text = (Path(__file__).resolve().parents[1] / "pyproject.toml").read_text(encoding="utf-8")
    listed = re.search(r"^packages\s*=\s*\[(.*?)\]", text, re.M | re.S)
    assert listed, "pyproject.toml has no packages list"
    names = set(re.findall(r'"([^"]+)"', listed.group(1)))
    for init in PKG.rglob("__init__.py"):
        if "__pycache__" in init.parts:
            continue
        dotted = ".".join(init.parent.relative_to(PKG.parent).parts)
        assert dotted in names, f"{dotted} is missing from the packages of pyproject.toml"


def test_layer_map_covers_the_package():
    for path in _py_files(PKG):
        if path.parent == PKG:
            assert path.stem in LAYERS, f"new top-level module {path.name}: give it a layer in test_layers.LAYERS"


def test_the_resolver_itself():
    # guard against a broken resolver making the layer checks vacuous
    assert _resolve(PKG / "api.py", "core.solver", 1, ()) == ["ionbal.core.solver"]
    assert _resolve(PKG / "data" / "pack.py", "core.constants", 2, ()) == ["ionbal.core.constants"]
    assert _resolve(PKG / "core" / "solver.py", "", 1, ("status",)) == ["ionbal.core.status"]
    assert _resolve(PKG / "core" / "__init__.py", "solver", 1, ()) == ["ionbal.core.solver"]
    assert _resolve(PKG / "__init__.py", "api", 1, ()) == ["ionbal.api"]
    assert _layer_of("ionbal.grid") == 4.5 and _layer_of("ionbal.core.saha") == 1
    assert _layer_of("ionbal.io.reader") == 4 and _layer_of("ionbal.grid.runner") == 4.5
    assert _layer_of("numpy") is None
    assert _layer_of("ionbal.__version__") == 3


# ----------------------------------------------------------------------------------------------
# The JIT-off switch
# ----------------------------------------------------------------------------------------------

JIT_OFF_STATES = {"T": [1500.0, 5800.0, 12000.0, 3.0e5], "P": [1e6, 1e5, 1e2, 1e-3]}


def test_disable_jit_gives_the_same_answers(tmp_path):
    code = textwrap.dedent("""
        import json, sys
        import numpy as np
        import ionbal
        from ionbal.core import config, solver
        assert config.DISABLE_JIT, "IONBAL_DISABLE_JIT=1 was not read"
        assert not hasattr(solver.solve_many, "py_func"), "kernels are still numba dispatchers"
        states = json.loads(sys.argv[1])
        mix = ionbal.Mixture({"H": 12.0, "He": 10.93, "C": 8.43, "O": 8.69, "Na": 6.24, "Fe": 7.5})
        r = ionbal.solve(np.array(states["T"]), gas_pressure=np.array(states["P"]), mixture=mix)
        e = ionbal.solve(np.array(states["T"]), electron_pressure=r.electron_pressure, mixture=mix)
        print(json.dumps({"ne": r.electron_density.tolist(), "nn": r.nuclei_density.tolist(),
                          "fe": r.fractions("Fe").tolist(), "hm": r.number_density("H-").tolist(),
                          "status": r.status.tolist(), "ne_e": e.nuclei_density.tolist()}))
    """)
    env = dict(os.environ, IONBAL_DISABLE_JIT="1")
    # run outside the source tree, so that the installed package (with its tables) is imported
    out = subprocess.run([sys.executable, "-c", code, json.dumps(JIT_OFF_STATES)], capture_output=True, text=True,
                         env=env, timeout=900, cwd=tmp_path)
    assert out.returncode == 0, out.stderr
    plain = json.loads(out.stdout.strip().splitlines()[-1])

    mix = ionbal.Mixture({"H": 12.0, "He": 10.93, "C": 8.43, "O": 8.69, "Na": 6.24, "Fe": 7.5})
    T = np.array(JIT_OFF_STATES["T"])
    r = ionbal.solve(T, gas_pressure=np.array(JIT_OFF_STATES["P"]), mixture=mix)
    e = ionbal.solve(T, electron_pressure=r.electron_pressure, mixture=mix)
    from ionbal.core import config

    assert not config.DISABLE_JIT
    assert plain["status"] == [0] * T.size
    np.testing.assert_allclose(plain["ne"], r.electron_density, rtol=1e-12)
    np.testing.assert_allclose(plain["nn"], r.nuclei_density, rtol=1e-12)
    np.testing.assert_allclose(plain["fe"], r.fractions("Fe"), rtol=1e-12, atol=1e-300)
    np.testing.assert_allclose(plain["hm"], r.number_density("H-"), rtol=1e-12)
    np.testing.assert_allclose(plain["ne_e"], e.nuclei_density, rtol=1e-12)

"""The house rules of DEVELOPERS.md, read from the source with ast (common practice:
layered packages whose lower layers never import the upper ones; circle detection by
Tarjan 1972, "Depth-first search and linear graph algorithms", SIAM J. Comput. 1:146).
"""
from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

import transport
from import_graph import Edge, Graph, cycles, forbidden, read_graph

ROOT = Path(transport.__file__).resolve().parent

# Lower layers never import the upper ones. model/ is the SI domain; solvers/ are
# unit-free engines over model/; nothing but cli/ imports cli/.
UPPER = {"io", "plot", "scenario", "site", "cli", "analysis", "verify", "api"}
RULES = {
    "model": UPPER | {"solvers"},
    "solvers": UPPER,
    "units": UPPER | {"model", "solvers"},
    "caution": UPPER | {"model", "solvers", "units"},
    **{a: {"cli"} for a in ("io", "plot", "scenario", "site", "analysis", "verify", "api")},
}
# The one hand-over across the rule, made when called (as xarray's Dataset.to_netcdf
# hands over to its backends): Solution.to_dataset builds the CF layout of io/netcdf.
ALLOWED = {("transport.solvers.result", "transport.io.netcdf")}
MAX_LINES = 520  # "about 500 lines" (DEVELOPERS.md)


@pytest.fixture(scope="module")
def graph():
    return read_graph(ROOT)


def test_no_import_circles(graph):
    """No two modules import each other, directly or around a loop."""
    assert cycles(graph) == []


def test_no_forbidden_direction(graph):
    """model/ and solvers/ import no I/O, plotting, scenario, site or CLI code; nothing
    outside cli/ imports cli/."""
    bad = forbidden(graph, RULES, ALLOWED)
    assert bad == [], "\n".join(f"{e.source}:{e.line} imports {e.target}" for e in bad)


def test_allowed_crossing_is_made_when_called(graph):
    """The one exempted crossing is a function-local import, not a load-time one."""
    for src, tgt in ALLOWED:
        edges = [e for e in graph.edges if (e.source, e.target) == (src, tgt)]
        assert all(e.local for e in edges)


def test_no_private_names_across_modules(graph):
    """No module imports, or reaches through a module alias, another module's
    underscore names."""
    assert graph.private == [], "\n".join(f"{s}:{line} uses {t}"
                                          for s, t, line in graph.private)


def test_modules_stay_readable(graph):
    """No module over about 500 lines."""
    long = {m: n for m, p in graph.modules.items()
            if (n := len(p.read_text(encoding="utf-8").splitlines())) > MAX_LINES}
    assert long == {}


def test_run_command_loads_only_what_a_single_run_needs():
    """``stratiflux run`` (its modules, in a fresh interpreter) loads neither xarray,
    pandas nor Dask, nor the finite-volume engine (scipy.integrate), the decay-chain
    and staged-run solvers or matplotlib: they load when a run asks for them
    (DEVELOPERS.md, start-up; benchmarks/bench_startup.py)."""
    lazy = ("xarray", "pandas", "dask", "scipy.integrate", "matplotlib",
            "transport.solvers.fv.engine", "transport.solvers.chain",
            "transport.solvers.timeline", "transport.io.netcdf")
    code = ("import sys, transport.cli.main, transport.cli.run;"
            f"print(' '.join(m for m in {lazy!r} if m in sys.modules))")
    loaded = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                            check=True).stdout.split()
    assert loaded == []


def test_public_names_resolve():
    """Every name of ``transport.__all__`` resolves to an object of the package."""
    for name in transport.__all__:
        assert getattr(transport, name) is not None, name
    with pytest.raises(AttributeError):
        transport.no_such_name  # noqa: B018


# The checker itself must be able to fail: small synthetic packages.

def _package(tmp_path, files):
    root = tmp_path / "pkg"
    for rel, text in files.items():
        p = root / rel
        p.parent.mkdir(parents=True, exist_ok=True)
        p.write_text(text)
    for d in [root, *[p for p in root.rglob("*") if p.is_dir()]]:
        (d / "__init__.py").touch()
    return root


def test_checker_finds_a_circle_a_forbidden_import_and_a_private_name(tmp_path):
    root = _package(tmp_path, {
        "solvers/a.py": "from pkg.solvers import b\nfrom pkg.io.w import write\n",
        "solvers/b.py": "from .a import _helper\nimport pkg.solvers.a as aa\nx = aa._y\n",
        "io/w.py": "def write():\n    pass\n",
        "io/r.py": "def read():\n    from pkg.solvers.a import f\n",
    })
    g = read_graph(root)
    assert cycles(g) == [["pkg.solvers.a", "pkg.solvers.b"]]
    assert [(e.source, e.target) for e in forbidden(g, {"solvers": {"io"}})] == [
        ("pkg.solvers.a", "pkg.io.w")]
    assert sorted(t for _, t, _ in g.private) == ["pkg.solvers.a._helper", "pkg.solvers.a._y"]
    local = [e for e in g.edges if e.source == "pkg.io.r"]
    assert local and all(e.local for e in local)


def test_checker_accepts_a_clean_package(tmp_path):
    root = _package(tmp_path, {
        "model/m.py": "X = 1\n",
        "solvers/s.py": "from pkg.model.m import X\n",
        "io/w.py": "from pkg.solvers.s import X\n",
    })
    g = read_graph(root)
    assert cycles(g) == [] and forbidden(g, {"model": {"solvers", "io"},
                                             "solvers": {"io"}}) == []
    assert g.private == [] and isinstance(g, Graph)
    assert Edge("pkg.io.w", "pkg.solvers.s", 1, False) in g.edges

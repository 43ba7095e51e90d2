"""Layering: the computational core imports neither streamlit nor duckdb (DEVELOPERS.md); no
import cycle among screenlab modules (read statically with ast, imports inside functions
included, ``if TYPE_CHECKING:`` blocks left out)."""
from __future__ import annotations

import ast
import pkgutil
import subprocess
import sys
from pathlib import Path

import pytest

import screenlab

CORE_PREFIXES = ("screenlab.ingest", "screenlab.kinetics", "screenlab.stats", "screenlab.export",
                 "screenlab.model", "screenlab.units", "screenlab.plates", "screenlab.settings",
                 "screenlab.errors", "screenlab.pipeline", "screenlab.viz", "screenlab.flags", "screenlab.schema",
                 "screenlab.demo", "screenlab.synthetic")


def _core_modules() -> list[str]:
    names = []
    for info in pkgutil.walk_packages(screenlab.__path__, "screenlab."):
        if info.name.startswith(CORE_PREFIXES):
            names.append(info.name)
    return sorted(names)


def test_core_modules_exist():
    assert "screenlab.units" in _core_modules()


def test_core_never_imports_streamlit_or_duckdb():
    mods = _core_modules()
    code = (
        "import sys, importlib\n"
        f"for m in {mods!r}:\n"
        "    importlib.import_module(m)\n"
        "bad = [m for m in ('streamlit', 'duckdb') if m in sys.modules]\n"
        "print(','.join(bad))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "", f"core pulled in: {out.stdout.strip()}"


def test_cli_help_does_not_import_heavy_modules():
    code = (
        "import sys\n"
        "from screenlab.cli import build_parser\n"
        "build_parser()\n"
        "print(','.join(m for m in ('streamlit', 'duckdb', 'scipy', 'plotly') if m in sys.modules))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""


# --------------------------------------------------------------------------------------------
# import cycles (static: every import statement of the source, also those inside functions,
# since a lazy import only hides a circle until the function runs)

def _module_files(root: Path, package: str) -> dict[str, Path]:
    out = {}
    for path in root.rglob("*.py"):
        parts = [package, *path.relative_to(root).with_suffix("").parts]
        if parts[-1] == "__init__":
            parts = parts[:-1]
        out[".".join(parts)] = path
    return out


def _is_type_checking(node: ast.AST) -> bool:
    test = getattr(node, "test", None)
    return isinstance(node, ast.If) and (
        (isinstance(test, ast.Name) and test.id == "TYPE_CHECKING")
        or (isinstance(test, ast.Attribute) and test.attr == "TYPE_CHECKING"))


def _imports(tree: ast.AST):
    """Import nodes outside ``if TYPE_CHECKING:`` blocks."""
    todo = [tree]
    while todo:
        node = todo.pop()
        if _is_type_checking(node):
            todo.extend(node.orelse)
            continue
        if isinstance(node, (ast.Import, ast.ImportFrom)):
            yield node
        todo.extend(ast.iter_child_nodes(node))


def import_graph(root: Path, package: str) -> dict[str, set[str]]:
    """module -> the package's modules it imports (``from pkg.mod import name`` counts as
    ``pkg.mod.name`` when that is a module, else ``pkg.mod``)."""
    files = _module_files(root, package)

    def known(name: str) -> str | None:
        while name and name not in files:
            name = name.rpartition(".")[0]
        return name or None

    graph: dict[str, set[str]] = {}
    for mod, path in files.items():
        here = mod if path.name == "__init__.py" else mod.rpartition(".")[0]
        deps: set[str | None] = set()
        for node in _imports(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.Import):
                deps.update(known(a.name) for a in node.names if a.name.split(".")[0] == package)
                continue
            if node.level:
                base = here.split(".")[: len(here.split(".")) - (node.level - 1)]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            if target.split(".")[0] != package:
                continue
            for a in node.names:
                full = f"{target}.{a.name}"
                deps.add(full if full in files else known(target))
        deps.discard(None)
        deps.discard(mod)
        graph[mod] = deps  # type: ignore[assignment]
    return graph


def import_cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """The strongly connected components of more than one module (Tarjan, iterative)."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    cycles = []
    for start in sorted(graph):
        if start in index:
            continue
        work = [(start, iter(sorted(graph[start])))]
        index[start] = low[start] = len(index)
        stack.append(start)
        on_stack.add(start)
        while work:
            v, children = work[-1]
            w = next(children, None)
            if w is not None:
                if w not in index:
                    index[w] = low[w] = len(index)
                    stack.append(w)
                    on_stack.add(w)
                    work.append((w, iter(sorted(graph.get(w, ())))))
                elif w in on_stack:
                    low[v] = min(low[v], index[w])
                continue
            work.pop()
            if work:
                low[work[-1][0]] = min(low[work[-1][0]], low[v])
            if low[v] == index[v]:
                comp = []
                while True:
                    w = stack.pop()
                    on_stack.discard(w)
                    comp.append(w)
                    if w == v:
                        break
                if len(comp) > 1:
                    cycles.append(sorted(comp))
    return sorted(cycles)


#: known cycles still to undo (none now). Each entry must still be a cycle: delete it once it is gone.
PENDING_CYCLES: list[list[str]] = []


def test_cycle_finder_sees_a_lazy_cycle_and_skips_type_checking(tmp_path):
    # a plain three-module package written here: a -> b at the top, b -> c inside a function,
    # c -> a (relative import); d -> a only under TYPE_CHECKING, a -> d nowhere else
    pkg = tmp_path / "pkg"
    pkg.mkdir()
    (pkg / "__init__.py").write_text("")
    (pkg / "a.py").write_text("from pkg import b\nfrom typing import TYPE_CHECKING\nif TYPE_CHECKING:\n"
                              "    from pkg import d\n")
    (pkg / "b.py").write_text("def f():\n    import pkg.c\n")
    (pkg / "c.py").write_text("from .a import something\n")
    (pkg / "d.py").write_text("import pkg.a\n")
    graph = import_graph(pkg, "pkg")
    assert graph["pkg.a"] == {"pkg.b"} and graph["pkg.c"] == {"pkg.a"} and graph["pkg.d"] == {"pkg.a"}
    assert import_cycles(graph) == [["pkg.a", "pkg.b", "pkg.c"]]


def test_no_import_cycles_among_screenlab_modules():
    graph = import_graph(Path(screenlab.__file__).parent, "screenlab")
    assert "screenlab.app.cache" in graph and "screenlab.units" in graph
    cycles = import_cycles(graph)
    for pending in PENDING_CYCLES:
        assert pending in cycles, f"{pending} is no longer a cycle: remove it from PENDING_CYCLES"
    new = [c for c in cycles if c not in PENDING_CYCLES]
    assert new == [], "import cycles: " + "; ".join(" <-> ".join(c) for c in new)


def test_app_cache_imports_no_page_module():
    # the caching layer wraps core calls; pages import it, never the other way round
    graph = import_graph(Path(screenlab.__file__).parent, "screenlab")
    assert not {d for d in graph["screenlab.app.cache"] if d.startswith("screenlab.app.app_pages")}


# --------------------------------------------------------------------------------------------
# imports on demand: the analysis commands load neither scipy.stats nor plotly nor streamlit

_HEAVY = ("scipy.stats", "plotly", "streamlit")
_RUN_AND_LIST = (
    "import contextlib, io, sys\n"
    "from screenlab.cli import main\n"
    "with contextlib.redirect_stdout(io.StringIO()):\n"
    "    rc = main(sys.argv[1:])\n"
    f"print(rc, ','.join(sorted({{m.split('.')[0] if m.startswith(('plotly', 'streamlit')) else 'scipy.stats' "
    f"for m in sys.modules if m.startswith({_HEAVY!r})}})))\n"
)


@pytest.fixture(scope="module")
def small_store(tmp_path_factory, write_sample_campaign):
    from screenlab.ingest import read_campaign
    from screenlab.store import Store

    tmp = tmp_path_factory.mktemp("small-store")
    folder = write_sample_campaign(tmp / "small", "small-campaign")
    path = tmp / "store.duckdb"
    Store(path).import_campaign(read_campaign(folder))
    return path


@pytest.mark.parametrize("command", [["rank"], ["rank", "--metric", "ea"], ["rates"], ["rates", "--per-well"],
                                     ["arrhenius"]])
def test_analysis_commands_load_no_heavy_modules(small_store, command):
    args = [*command, "--store", str(small_store), "--campaign", "small-campaign"]
    out = subprocess.run([sys.executable, "-c", _RUN_AND_LIST, *args], capture_output=True, text=True)
    assert out.returncode == 0, out.stderr[-2000:]
    rc, _, loaded = out.stdout.strip().splitlines()[-1].partition(" ")
    assert rc == "0", out.stderr[-2000:]
    assert loaded == "", f"screenlab {' '.join(command)} loaded {loaded}"


def test_the_check_sees_a_heavy_import(small_store):
    # the same probe after an import of scipy.stats reports it (the check can fail)
    code = "import scipy.stats\n" + _RUN_AND_LIST
    out = subprocess.run([sys.executable, "-c", code, "rates", "--store", str(small_store), "--campaign",
                          "small-campaign"], capture_output=True, text=True, check=True)
    assert out.stdout.strip().splitlines()[-1] == "0 scipy.stats"


# --------------------------------------------------------------------------------------------
# the tests themselves: no sys.path patches, no test module importing another one (shared
# builders are conftest fixtures or plain helper modules, DEVELOPERS.md "Running the checks")

TESTS = Path(__file__).resolve().parent


def test_no_test_module_imports_another_and_no_sys_path_patch():
    test_modules = {p.stem for p in TESTS.glob("test_*.py")}
    bad = []
    for path in sorted(TESTS.rglob("*.py")):
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            if isinstance(node, ast.ImportFrom) and (node.module or "").split(".")[0] in test_modules | {"conftest"}:
                bad.append(f"{path.name}:{node.lineno} imports {node.module}")
            elif isinstance(node, ast.Import):
                bad += [f"{path.name}:{node.lineno} imports {a.name}" for a in node.names
                        if a.name.split(".")[0] in test_modules | {"conftest"}]
            elif (isinstance(node, ast.Attribute) and node.attr == "path" and isinstance(node.value, ast.Name)
                  and node.value.id == "sys"):
                bad.append(f"{path.name}:{node.lineno} uses sys.path")
    assert bad == []

"""The layout holds itself: pure rooms import no I/O, layers import only those below them,
no import cycles anywhere (imports inside functions included), optional dependencies stay
in their one module, and the public scripting API keeps its import paths."""

from __future__ import annotations

import ast
import importlib
import pathlib
import sys

import pytest

PKG = pathlib.Path(__file__).resolve().parents[1] / "rigloop"

# Rooms that must stay pure: standard library and numpy only (core/subject.py may use
# msgpack, a byte format with no I/O, for its snapshots), and none of the I/O modules below.
PURE = ["core", "rules", "wire", "offline/batch", "offline/truth.py"]
FORBIDDEN = {"zmq", "serial", "sqlite3", "socket", "asyncio", "time", "os", "subprocess", "threading"}
ALLOWED_THIRD_PARTY = {"numpy", "msgpack"}
# rules/ reads files in exactly one module: the loader.
IO_EXCEPTIONS = {("rules", "load.py"): {"os"}}

# Each layer imports only from the layers before it (and from itself). The public-path
# modules at the top (trial, step, subject: re-exports of core) are for scripts outside.
LAYERS = [
    {"errors", "version"},
    {"core"},
    {"rules"},
    {"wire", "store", "links"},
    {"replay"},
    {"offline"},
    {"fit", "outputs", "serve"},  # fit runs its likelihood on offline's batch kernels
    {"testing"},
    {"demo"},
    {"cli"},
    {"__init__", "__main__", "trial", "step", "subject", "examples"},
]
# the one module each optional dependency may be imported in
OPTIONAL = {
    "matplotlib": "outputs/report.py",
    "scipy": "fit/search.py",
    "numba": "offline/batch_kernels.py",
    "pandas": "outputs/frames.py",  # rigloop.open's DataFrames and the Parquet export (pyarrow through pandas)
    "pyarrow": "outputs/frames.py",
    "pynwb": "outputs/nwb.py",
    "starlette": "serve/web.py",
    "uvicorn": "serve/web.py",
    "tqdm": "cli/progress.py",  # a dependency, but the bars are drawn in one place
    "dask": "offline/executors.py",  # the optional cluster executor (the 'cluster' extra)
    "distributed": "offline/executors.py",
}


def _imports(path: pathlib.Path):
    """Top-level names of the absolute imports in ``path`` (relative ones are rigloop's)."""
    tree = ast.parse(path.read_text(), filename=str(path))
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            for alias in node.names:
                yield alias.name.split(".")[0]
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
            yield node.module.split(".")[0]


def _files(entry: str):
    p = PKG / entry
    if p.is_dir():
        return sorted(p.rglob("*.py"))
    return [p] if p.exists() else []


def _module_of(path: pathlib.Path) -> str:
    parts = list(path.relative_to(PKG.parent).with_suffix("").parts)
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def _modules() -> dict[str, pathlib.Path]:
    return {_module_of(p): p for p in PKG.rglob("*.py")}


def _rigloop_imports(path: pathlib.Path, modules: dict[str, pathlib.Path]) -> set[str]:
    """The rigloop modules ``path`` imports, anywhere in it (inside functions too)."""
    here = _module_of(path)
    package = here if path.name == "__init__.py" else here.rpartition(".")[0]
    out: set[str] = set()
    for node in ast.walk(ast.parse(path.read_text(), filename=str(path))):
        if isinstance(node, ast.Import):
            targets = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[: len(base) - (node.level - 1)]
                mod = ".".join(base + ([node.module] if node.module else []))
            else:
                mod = node.module or ""
            targets = [f"{mod}.{a.name}" if f"{mod}.{a.name}" in modules else mod for a in node.names]
        else:
            continue
        for t in targets:
            while t and t not in modules:
                t = t.rpartition(".")[0]
            if t and t.startswith("rigloop") and t != here:
                out.add(t)
    return out


def _graph() -> dict[str, set[str]]:
    modules = _modules()
    return {m: _rigloop_imports(p, modules) for m, p in modules.items()}


def _room(module: str) -> str:
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else "__init__"


@pytest.mark.parametrize("entry", PURE)
def test_pure_rooms_do_no_io(entry):
    """Pure rooms import only the standard library and numpy, never an I/O module."""
    stdlib = set(sys.stdlib_module_names)
    files = _files(entry)
    assert files, f"{entry} is not in rigloop/"
    for path in files:
        allowed_io = IO_EXCEPTIONS.get((path.parent.name, path.name), set())
        for name in _imports(path):
            assert name not in FORBIDDEN - allowed_io, f"{path.relative_to(PKG)} imports {name}"
            assert name in stdlib or name in ALLOWED_THIRD_PARTY or name == "rigloop", (
                f"{path.relative_to(PKG)} imports third-party {name}"
            )


def test_pure_rooms_import_no_impure_room():
    """A pure room's rigloop imports stay inside the pure rooms (and errors)."""
    pure_rooms = {"core", "rules", "wire", "errors"}
    pure_files = {"rigloop.offline.batch", "rigloop.offline.batch_kernels", "rigloop.offline.truth"}
    def pure(m: str) -> bool:
        return _room(m) in pure_rooms or any(m == f or m.startswith(f + ".") for f in pure_files)

    for module, targets in _graph().items():
        if pure(module):
            for t in targets:
                assert pure(t), f"{module} (pure) imports {t}"


def test_zmq_and_serial_live_in_links_only():
    """Only rigloop/links/ imports zmq or serial."""
    for path in PKG.rglob("*.py"):
        rel = path.relative_to(PKG)
        names = set(_imports(path))
        if "serial" in names or "zmq" in names:
            assert rel.parts[0] == "links", f"{rel} imports zmq or serial"


def test_each_optional_dependency_is_imported_in_one_module():
    for path in PKG.rglob("*.py"):
        rel = path.relative_to(PKG).as_posix()
        for name in set(_imports(path)) & set(OPTIONAL):
            assert rel == OPTIONAL[name], f"{rel} imports {name} (only {OPTIONAL[name]} may)"


def test_no_import_cycles():
    """No module reaches itself through imports, counting those inside functions."""
    graph = _graph()
    state: dict[str, int] = {}  # 1 on the path, 2 done
    path: list[str] = []

    def visit(m: str) -> None:
        state[m] = 1
        path.append(m)
        for t in sorted(graph.get(m, ())):
            if state.get(t) == 1:
                cycle = path[path.index(t):] + [t]
                raise AssertionError("import cycle: " + " -> ".join(cycle))
            if t not in state:
                visit(t)
        path.pop()
        state[m] = 2

    for m in sorted(graph):
        if m not in state:
            visit(m)


def test_layers_import_only_downwards():
    """Each room imports only rooms of the layers before it (errors, core, rules, ...)."""
    rank = {room: i for i, layer in enumerate(LAYERS) for room in layer}
    for module, targets in _graph().items():
        room = _room(module)
        assert room in rank, f"{module}: room {room!r} is not in the layer table"
        for t in targets:
            troom = _room(t)
            if troom == room:
                continue
            assert rank[troom] < rank[room], f"{module} ({room}) imports {t} ({troom}), a layer above or beside it"


@pytest.mark.parametrize("path, names", [
    ("rigloop.rules.load", ["load_rules_file", "load_rules", "load_example"]),
    ("rigloop.rules", ["load_rules_file", "load_rules", "load_example"]),
    ("rigloop.subject", ["new_subject", "SubjectState"]),
    ("rigloop.step", ["begin_session", "step", "Update"]),
    ("rigloop.trial", ["TrialEvent", "CuePresentation", "Outcome", "Response", "Decision"]),
    ("rigloop", ["TrialEvent", "CuePresentation", "Outcome", "Response", "Decision"]),
])
def test_the_scripting_api_keeps_its_paths(path, names):
    """Scripts outside rigloop import these names from these paths: they are the core's own objects."""
    from rigloop.core import step as core_step
    from rigloop.core import subject as core_subject
    from rigloop.core import trial as core_trial

    module = importlib.import_module(path)
    for name in names:
        obj = getattr(module, name)
        for core in (core_step, core_subject, core_trial):
            if hasattr(core, name):
                assert obj is getattr(core, name), f"{path}.{name} is not {core.__name__}.{name}"

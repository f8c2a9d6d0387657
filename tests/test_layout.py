"""The layering rules hold themselves: pure modules import no I/O, optional deps stay put."""

import ast
import pathlib

import pytest

PKG = pathlib.Path(__file__).resolve().parents[1] / "rigloop"

# Modules that must stay pure: standard library and numpy only, and none of the I/O
# modules below. subject.py may use msgpack (a byte format, no I/O) for its snapshots.
PURE = ["trial.py", "features.py", "performance.py", "behaviour.py", "response_models.py", "truth.py", "subject.py",
        "step.py", "wire", "batch.py", "learners", "rules", "values.py"]
FORBIDDEN = {"zmq", "serial", "sqlite3", "socket", "asyncio", "time", "os", "subprocess", "threading"}
ALLOWED_THIRD_PARTY = {"numpy", "msgpack"}
# rules/ reads files in exactly one module: the loader.
IO_EXCEPTIONS = {("rules", "load.py"): {"os"}}


def _imports(path: pathlib.Path):
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


@pytest.mark.parametrize("entry", PURE)
def test_pure_modules_do_no_io(entry):
    """Pure modules import only the standard library and numpy, never an I/O module."""
    import sys

    stdlib = set(sys.stdlib_module_names)
    for path in _files(entry):
        allowed_io = IO_EXCEPTIONS.get((path.parent.name, path.name), set())
        for name in _imports(path):
            assert name not in FORBIDDEN - allowed_io, f"{path.relative_to(PKG)} imports {name}"
            assert name in stdlib or name in ALLOWED_THIRD_PARTY or name == "rigloop", (
                f"{path.relative_to(PKG)} imports third-party {name}"
            )


def test_zmq_and_serial_live_in_links_only():
    """Only rigloop/links/ (and security, for zmq.auth) import zmq or serial."""
    for path in PKG.rglob("*.py"):
        rel = path.relative_to(PKG)
        names = set(_imports(path))
        if "serial" in names:
            assert rel.parts[0] == "links", f"{rel} imports serial"
        if "zmq" in names:
            assert rel.parts[0] == "links" or rel.name == "security.py", f"{rel} imports zmq"

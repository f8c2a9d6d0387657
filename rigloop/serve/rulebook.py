"""The rule files a daemon serves, by name and by content hash, and the rule texts of
older stored sessions (parsed once): which ``Rules`` a session runs under."""

from __future__ import annotations

from collections.abc import Iterable
from pathlib import Path
from typing import Any

from ..errors import RuleError
from ..replay import RulesCache, session_rules
from ..store import SessionInfo


def load_rule_set(specs: Iterable[str]) -> dict[str, Any]:
    """Rule files by name (file stem; a shipped example by its name). A directory
    contributes every ``*.toml`` in it. Two files with one name are an error."""
    from ..rules import load_example, load_rules_file

    out: dict[str, Any] = {}

    def add(name: str, rules: Any, where: str) -> None:
        if name in out and out[name].sha256 != rules.sha256:
            raise RuleError([f"two different rule files are named {name!r} ({where})"], where)
        out[name] = rules

    for spec in specs:
        p = Path(spec)
        if p.is_dir():
            files = sorted(p.glob("*.toml"))
            if not files:
                raise RuleError([f"directory {p} holds no *.toml rule files"], str(p))
            for f in files:
                add(f.stem, load_rules_file(f), str(f))
        elif p.exists() or p.suffix == ".toml":
            add(p.stem, load_rules_file(p), str(p))
        else:
            add(spec, load_example(spec), f"example:{spec}")
    return out


class RuleBook:
    """The served rule files (``named``, what a rig's open-session message may name) and
    every rule file a stored session ran under, found by its sha256."""

    def __init__(self, named: dict[str, Any]):
        self.named = named
        self.by_sha = {r.sha256: r for r in named.values()}
        self._stored = RulesCache()  # rule texts of sessions opened under files no longer served

    def for_session(self, info: SessionInfo) -> Any:
        """The rules session ``info`` runs under: a served file, else its stored text."""
        rules = self.by_sha.get(info.rules_sha256)
        if rules is None:
            rules = session_rules(info, self._stored)
        return rules

    def for_trial(self, info: SessionInfo | None, state: Any) -> Any:
        """The rules a subject's trial ran under: its open session's (``info``), else the
        served file its state was stepped under, else None."""
        if info is not None:
            return self.for_session(info)
        return self.by_sha.get(state.context.rules_sha256)

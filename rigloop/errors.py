"""Error types.

Each error subclasses the builtin it resembles, so callers can catch ``ValueError``
without knowing rigloop, and carries its evidence as attributes so programs can act
on it. Messages say whose fault it is and what to fix.
"""

from __future__ import annotations

from typing import Any


class RigloopError(Exception):
    """Base of every error rigloop raises on purpose."""


class BadArgument(RigloopError, ValueError):
    """A caller passed a value a function cannot use (wrong shape, NaN, out of range).

    ``argument`` names the parameter, ``value`` is what came.
    """

    def __init__(self, argument: str, expected: str, value: Any):
        self.argument = argument
        self.expected = expected
        self.value = value
        super().__init__(f"{argument!r} must be {expected} (got {_show(value)})")


class BadEvent(RigloopError, ValueError):
    """The rig sent a trial that breaks a rule; nothing from it is stored.

    ``field`` is the dotted field name, ``value`` the offending value, ``raw`` the
    whole input when there was one.
    """

    def __init__(self, field: str, rule: str, value: Any = None, raw: Any = None):
        self.field = field
        self.rule = rule
        self.value = value
        self.raw = raw
        super().__init__(f"{field!r} {rule} (got {_show(value)})")


class RuleError(RigloopError, ValueError):
    """A rule file (or rig profile) is invalid. ``problems`` lists every fault found."""

    def __init__(self, problems: list[str], source: str | None = None):
        self.problems = list(problems)
        self.source = source
        head = f"{source}: " if source else ""
        n = len(self.problems)
        lines = "\n".join(f"  - {p}" for p in self.problems)
        super().__init__(f"{head}{n} problem{'s' if n != 1 else ''} in rule file:\n{lines}")


class StoreError(RigloopError, RuntimeError):
    """The data store refused an operation or found damage."""


class ConflictingTrial(StoreError):
    """A different event arrived under a (subject, session, trial) key already stored."""

    def __init__(self, subject: str, session: str, trial: int):
        self.subject, self.session, self.trial = subject, session, trial
        super().__init__(
            f"trial {trial} of session {session!r} for subject {subject!r} is already stored "
            "with different content; the rig sent a conflicting retry (nothing was overwritten)"
        )


class SchemaTooNew(StoreError):
    """The database was written by a newer rigloop than this one."""


class WireError(RigloopError, ValueError):
    """A message from a rig could not be decoded or failed its schema.

    ``code`` is a stable machine-readable code sent back in the error reply;
    ``field`` names the offending field when there is one.
    """

    def __init__(self, code: str, message: str, raw: bytes | None = None, *, field: str | None = None):
        self.code = code
        self.raw = raw
        self.field = field
        super().__init__(message)


def _show(value: Any, limit: int = 80) -> str:
    text = repr(value)
    return text if len(text) <= limit else text[: limit - 3] + "..."

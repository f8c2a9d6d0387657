"""The loop thread's subject records: each loaded subject's newest committed state, the
open session of each subject, and where each subject's newest snapshot was taken.

A subject is loaded lazily: its state is recovered from the store (newest valid
snapshot plus the trials after it) the first time a request needs it, and dropped
when a commit of its trials failed, so the next request reloads what the store holds.
"""

from __future__ import annotations

from typing import Any

from ..core.subject import SubjectState, resident
from ..replay import recover
from ..store import SessionInfo, Store


class Subjects:
    """Committed states, open sessions and snapshot marks (loop thread only)."""

    def __init__(self, store: Store):
        self.store = store
        self.states: dict[str, SubjectState] = {}
        self.open: dict[str, SessionInfo] = {}
        self.snapshot_at: dict[str, tuple[str, int]] = {}  # (session, trial) of the newest snapshot
        for info in store.sessions():
            if info.closed_at is None:
                self.open[info.subject] = info  # later sessions of a subject replace earlier ones

    def recover(self, subject: str) -> SubjectState | None:
        """The subject's state from the store, kept as its committed state (None if unknown)."""
        state = recover(self.store, subject)
        if state is not None:
            self.states[subject] = resident(state)
        return state

    def save_snapshot(self, subject: str, state: SubjectState) -> None:
        """Snapshot ``state`` unless the newest snapshot is of this very trial."""
        at = (state.context.session, state.last_trial)
        if self.snapshot_at.get(subject) == at:
            return
        self.store.save_snapshot(subject, at[0], at[1], state.to_bytes())
        self.snapshot_at[subject] = at

    def snapshot_open(self) -> None:
        """Snapshot every loaded subject whose state is of its open session (at shutdown)."""
        for subject, state in self.states.items():
            info = self.open.get(subject)
            if info is None or state.context is None or state.context.session != info.session:
                continue
            self.save_snapshot(subject, state)

    def open_sessions(self) -> list[dict[str, Any]]:
        """The open sessions as ``status()`` lists them, by subject."""
        out = []
        for subject, info in sorted(self.open.items()):
            st = self.states.get(subject)
            out.append({"subject": subject, "session": info.session, "rig": info.rig,
                        "rules": info.rules_name,
                        "last_trial": st.last_trial if st is not None and st.context is not None
                        and st.context.session == info.session else None})
        return out

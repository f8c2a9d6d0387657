"""The observer stream: decisions and updates published on the XPUB socket, topic =
subject. The socket sees the subscriptions, so a subject's message (with its watch
summary) is built only when someone subscribed to it."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from ..core.subject import SubjectState
from ..core.trial import Decision
from ..links.zmq import PubLink
from .summary import summary


def wire_pack(obj: Mapping[str, Any]) -> bytes:
    """msgpack for the observer stream (plain maps, not request/reply types)."""
    import msgpack

    return msgpack.packb(obj, use_bin_type=True)


class Publisher:
    """Observer messages for subscribed subjects only; never blocks (see ``PubLink``)."""

    def __init__(self, link: PubLink):
        self.link = link
        self.endpoint = link.endpoint
        self.wants = link.wants  # asked once per published trial: the link's own method, no wrapper

    def session_opened(self, subject: str, session: str, rig: str, first: Decision, state: SubjectState,
                       rules: Any) -> None:
        if self.wants(subject):
            self.link.publish(subject, wire_pack({"type": "session_opened", "subject": subject, "session": session,
                                                  "rig": rig, "decision": first.to_dict(),
                                                  "summary": summary(state, rules, first)}))

    def session_closed(self, subject: str, session: str) -> None:
        if self.wants(subject):
            self.link.publish(subject, wire_pack({"type": "session_closed", "subject": subject,
                                                  "session": session}))

    def trial(self, p: Any, rules: Any) -> None:
        """One stepped and committed trial (a ``Pending``); ``rules`` None leaves out the summary."""
        msg = {"type": "trial", "subject": p.event.subject, "rig": p.event.rig, "session": p.event.session,
               "trial": p.event.trial, "decision": p.decision.to_dict(), "update": p.update.to_dict()}
        if rules is not None:
            msg["summary"] = summary(p.state, rules, p.decision)
        self.link.publish(p.event.subject, wire_pack(msg))

    def close(self) -> None:
        self.link.close()

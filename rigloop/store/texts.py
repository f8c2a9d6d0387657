"""A trial's stored texts written directly: the canonical JSON of an event and a decision,
the same characters as ``records.canonical_json(x.to_dict())``.

Why: the texts are encoded before the reply. ``json``'s encoder walks a freshly built
dict, sorts its keys and dispatches on each value's type; here the keys are already in
sorted order and each field's type is known, so a text is one f-string: an event 1.9x and a decision 1.8x faster than the reference
(medians over 200 tone_reversal trials, interleaved: 20 -> 11 µs and 15 -> 8 µs on the
loaded 2-core machine); ``tools/bench/latency.py --breakdown`` shows the stage ``encode``.
Most of what is left is ``float.__repr__`` itself.

Anything these writers were not made for (a multi-step trial, extras, a value of an
unexpected type, a float that is not finite) is handed to ``canonical_json`` unchanged:
the reference is the readable version, and ``tests/test_store_texts.py`` checks the
two give the same characters.
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping
from typing import Any

from ..core.trial import Decision, TrialEvent

_CANONICAL = json.JSONEncoder(sort_keys=True, separators=(",", ":"), allow_nan=False)
_quote = json.encoder.encode_basestring_ascii  # what the canonical encoder uses (ensure_ascii)
_float = float.__repr__  # what json writes for a float (a subclass such as numpy's prints differently)
_int = int.__repr__
_isfinite = math.isfinite


class _Other(Exception):
    """A value the direct writer does not handle: use the reference encoder."""


def _scalar(v: Any) -> str:
    """One JSON scalar as the canonical encoder writes it."""
    t = type(v)
    if t is float:
        if _isfinite(v):
            return _float(v)
        raise _Other
    if t is str:
        return _quote(v)
    if v is None:
        return "null"
    if v is True:
        return "true"
    if v is False:
        return "false"
    if t is int:
        return _int(v)
    raise _Other


def _texts(items: Any) -> str:
    """A list of strings."""
    out = []
    for s in items:
        if type(s) is not str:
            raise _Other
        out.append(_quote(s))
    return "[" + ",".join(out) + "]"


def event_text(ev: TrialEvent) -> str:
    """``canonical_json(ev.to_dict())``, written directly for a one-step trial without extras."""
    if ev.steps or ev.extra:
        return _CANONICAL.encode(ev.to_dict())
    try:
        o, r = ev.outcome, ev.response
        cues = ",".join(f"[{_quote(c.cue)},{_scalar(c.onset)},{_scalar(c.offset)}]" for c in ev.cues)
        return (
            f'{{"cues":[{cues}],"duration":{_scalar(ev.duration)},"extra":{{}},'
            f'"outcome":{{"punishment":{_scalar(o.punishment)},"punishment_time":{_scalar(o.punishment_time)},'
            f'"reward_time":{_scalar(o.reward_time)},"reward_ul":{_scalar(o.reward_ul)},'
            f'"timeout_s":{_scalar(o.timeout_s)}}},'
            f'"response":{{"kind":{_scalar(r.kind)},"latency":{_scalar(r.latency)},"result":{_scalar(r.result)},'
            f'"value":{_scalar(r.value)}}},'
            f'"rig":{_scalar(ev.rig)},"session":{_scalar(ev.session)},"subject":{_scalar(ev.subject)},'
            f'"trial":{_scalar(ev.trial)},"wall_time":{_scalar(ev.wall_time)}}}'
        )
    except (_Other, TypeError):
        return _CANONICAL.encode(ev.to_dict())


def decision_text(d: Decision) -> str:
    """``canonical_json(d.to_dict())``, written directly."""
    try:
        return (
            f'{{"block":{_scalar(d.block)},"cue":{_scalar(d.cue)},"difficulty":{_scalar(d.difficulty)},'
            f'"end_session":{_scalar(d.end_session)},"overrides":{_texts(d.overrides)},'
            f'"reasons":{_texts(d.reasons)},"reward_armed":{_scalar(d.reward_armed)},'
            f'"reward_prob":{_scalar(d.reward_prob)},"reward_ul":{_scalar(d.reward_ul)},'
            f'"session":{_scalar(d.session)},"stage":{_scalar(d.stage)},"subject":{_scalar(d.subject)},'
            f'"trial":{_scalar(d.trial)},"valve_ms":{_scalar(d.valve_ms)},"warnings":{_texts(d.warnings)}}}'
        )
    except (_Other, TypeError):
        return _CANONICAL.encode(d.to_dict())


def quantities_text(q: Mapping[str, float | None]) -> str:
    """``canonical_json(q)`` of checked quantities. The reference encoder itself: for a flat
    map of floats, json's C encoder is faster than joining pieces here (measured)."""
    return _CANONICAL.encode(q)

"""A trial's stored texts written directly: the canonical JSON of an event and a decision,
the same characters as ``records.canonical_json(x.to_dict())``.

Why: the texts are encoded before the reply. ``json``'s encoder walks a freshly built
dict, sorts its keys and dispatches on each value's type; here the keys are already in
sorted order and each field's type is known, so a text is one f-string: an event 1.9x and a decision 1.8x faster than the reference
(medians over 200 tone_reversal trials, interleaved: 20 -> 11 µs and 15 -> 8 µs on the
loaded 2-core machine); ``tools/bench/latency.py --breakdown`` shows the stage ``encode``.
Most of what is left is ``float.__repr__`` itself. Testing the usual values once up front
instead of one call per value took a further 10.0 -> 6.4 µs (event) and 5.8 -> 3.8 µs
(decision), best of 25 rounds in a hot loop, the value-by-value writers timed alternately.

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
    """``canonical_json(ev.to_dict())``, written directly for a one-step trial without extras.

    The usual trial's values are tested once up front (each type exactly, and finite: a sum
    of finite floats is finite unless it overflows, which only sends it the longer way), so
    the text is one f-string without a call per value; anything else goes through
    ``_event_text_checked``, value by value, or the reference."""
    if ev.steps or ev.extra:
        return _CANONICAL.encode(ev.to_dict())
    o, r, cues = ev.outcome, ev.response, ev.cues
    rt, pt, lat, value, punishment, result = o.reward_time, o.punishment_time, r.latency, r.value, o.punishment, r.result
    if len(cues) != 1:
        return _event_text_checked(ev)
    c = cues[0]
    cue, onset, offset = c.cue, c.onset, c.offset
    if not (type(ev.duration) is float and type(ev.wall_time) is float and type(o.reward_ul) is float
            and type(o.timeout_s) is float and type(onset) is float and type(offset) is float
            and (rt is None or type(rt) is float) and (pt is None or type(pt) is float)
            and (lat is None or type(lat) is float) and (value is None or type(value) is float or type(value) is str)
            and (punishment is None or type(punishment) is str) and (result is None or type(result) is str)
            and type(ev.trial) is int and type(ev.subject) is str and type(ev.rig) is str
            and type(ev.session) is str and type(r.kind) is str and type(cue) is str
            and _isfinite(ev.duration + ev.wall_time + o.reward_ul + o.timeout_s + onset + offset + (rt or 0.0)
                          + (pt or 0.0) + (lat or 0.0) + (value if type(value) is float else 0.0))):
        return _event_text_checked(ev)
    f, q = _float, _quote
    return (
        f'{{"cues":[[{q(cue)},{f(onset)},{f(offset)}]],"duration":{f(ev.duration)},"extra":{{}},'
        f'"outcome":{{"punishment":{"null" if punishment is None else q(punishment)},'
        f'"punishment_time":{"null" if pt is None else f(pt)},'
        f'"reward_time":{"null" if rt is None else f(rt)},"reward_ul":{f(o.reward_ul)},'
        f'"timeout_s":{f(o.timeout_s)}}},'
        f'"response":{{"kind":{q(r.kind)},"latency":{"null" if lat is None else f(lat)},'
        f'"result":{"null" if result is None else q(result)},'
        f'"value":{"null" if value is None else f(value) if type(value) is float else q(value)}}},'
        f'"rig":{q(ev.rig)},"session":{q(ev.session)},"subject":{q(ev.subject)},'
        f'"trial":{_int(ev.trial)},"wall_time":{f(ev.wall_time)}}}'
    )


def _event_text_checked(ev: TrialEvent) -> str:
    """``event_text`` value by value: each scalar checked as it is written (the reference
    for anything unexpected)."""
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
    """``canonical_json(d.to_dict())``, written directly: the usual decision's values tested
    once up front as in ``event_text``, else ``_decision_text_checked``."""
    cue, difficulty, valve_ms = d.cue, d.difficulty, d.valve_ms
    if not (type(d.block) is str and type(d.stage) is str and type(d.session) is str and type(d.subject) is str
            and (cue is None or type(cue) is str) and type(d.trial) is int
            and type(d.reward_prob) is float and type(d.reward_ul) is float
            and (difficulty is None or type(difficulty) is float) and (valve_ms is None or type(valve_ms) is float)
            and type(d.end_session) is bool and type(d.reward_armed) is bool
            and _isfinite(d.reward_prob + d.reward_ul + (difficulty or 0.0) + (valve_ms or 0.0))):
        return _decision_text_checked(d)
    f, q = _float, _quote
    try:
        return (
            f'{{"block":{q(d.block)},"cue":{"null" if cue is None else q(cue)},'
            f'"difficulty":{"null" if difficulty is None else f(difficulty)},'
            f'"end_session":{"true" if d.end_session else "false"},"overrides":{_texts(d.overrides)},'
            f'"reasons":{_texts(d.reasons)},"reward_armed":{"true" if d.reward_armed else "false"},'
            f'"reward_prob":{f(d.reward_prob)},"reward_ul":{f(d.reward_ul)},'
            f'"session":{q(d.session)},"stage":{q(d.stage)},"subject":{q(d.subject)},'
            f'"trial":{_int(d.trial)},"valve_ms":{"null" if valve_ms is None else f(valve_ms)},'
            f'"warnings":{_texts(d.warnings)}}}'
        )
    except (_Other, TypeError):
        return _CANONICAL.encode(d.to_dict())


def _decision_text_checked(d: Decision) -> str:
    """``decision_text`` value by value (the reference for anything unexpected)."""
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

"""Hypothesis strategies for valid wire messages (requests and replies).

Sizes are small so a trial fits a 512-byte serial line most of the time; text draws
from all of Unicode except surrogates, which neither UTF-8 nor msgpack can carry.
"""

from __future__ import annotations

import string

from hypothesis import strategies as st

from rigloop.core.trial import (
    PUNISHMENTS,
    RESPONSE_RESULTS,
    CuePresentation,
    Decision,
    Outcome,
    Response,
    TrialEvent,
)
from rigloop.wire import (
    ERROR_CODES,
    REQUEST_TYPES,
    Ack,
    CloseSession,
    DecisionReply,
    ErrorReply,
    OpenSession,
    Ping,
    Pong,
    QueryState,
    StateReply,
    TrialReport,
)

_chars = st.characters(blacklist_categories=("Cs",))
_plain = st.text(string.ascii_letters + string.digits + "_", min_size=1, max_size=8)
_odd = st.text(_chars, min_size=1, max_size=6).filter(lambda s: s.isprintable() and s == s.strip())

idents = st.one_of(_plain, _plain, _plain, _odd)
texts = st.text(_chars, max_size=24)
request_ids = st.one_of(
    st.integers(0, 2**63 - 1), st.text(string.ascii_letters + string.digits + "_.:-", min_size=1, max_size=32)
)
times = st.one_of(st.floats(0, 30, allow_nan=False), st.floats(0, 1e300, allow_nan=False), st.just(0.0))
finite = st.floats(allow_nan=False, allow_infinity=False)
scalars = st.one_of(
    st.none(), st.booleans(), st.integers(-(2**63), 2**64 - 1), finite, st.text(_chars, max_size=12)
)


@st.composite
def cue_lists(draw):
    names = draw(st.lists(idents, max_size=3, unique=True))
    cues = []
    for name in names:
        onset = draw(st.floats(0, 1e6, allow_nan=False))
        cues.append(CuePresentation(name, onset, onset + draw(st.floats(0, 1e6, allow_nan=False))))
    return tuple(cues)


@st.composite
def outcomes(draw):
    reward = draw(st.one_of(st.just(0.0), st.floats(0, 1e4, allow_nan=False)))
    reward_time = draw(times) if reward > 0 else draw(st.one_of(st.none(), times))
    return Outcome(
        reward_ul=reward,
        reward_time=reward_time,
        punishment=draw(st.one_of(st.none(), st.sampled_from(PUNISHMENTS))),
        punishment_time=draw(st.one_of(st.none(), times)),
        timeout_s=draw(st.one_of(st.just(0.0), times)),
    )


responses = st.builds(
    Response,
    kind=st.one_of(st.just("none"), st.just("licks"), idents),
    value=st.one_of(st.none(), finite, idents, st.sampled_from(["3", "-1.5e3", "left"])),
    result=st.one_of(st.none(), st.sampled_from(RESPONSE_RESULTS)),
    latency=st.one_of(st.none(), times),
)


@st.composite
def trial_events(draw):
    cues, outcome, response = draw(cue_lists()), draw(outcomes()), draw(responses)
    probe = TrialEvent("s", "r", "x", 1, cues, outcome, response)
    duration = draw(st.one_of(st.none(), st.floats(0, 1e6, allow_nan=False).map(lambda d: probe.duration + d)))
    return TrialEvent(
        subject=draw(idents),
        rig=draw(idents),
        session=draw(idents),
        trial=draw(st.integers(1, 2**40)),
        cues=cues,
        outcome=outcome,
        response=response,
        duration=duration,
        wall_time=draw(st.one_of(st.just(0.0), st.floats(0, 4e9, allow_nan=False))),
        extra=draw(st.dictionaries(idents, scalars, max_size=3)),
    )


opens = st.builds(
    OpenSession,
    id=request_ids,
    subject=idents,
    rig=idents,
    session=idents,
    rules=idents,
    seed=st.one_of(st.none(), st.integers(0, 2**63 - 1)),  # the store keeps seeds as SQLite integers
    profile=st.one_of(st.none(), idents),
    wall_time=st.one_of(st.none(), st.floats(0, 4e9, allow_nan=False)),
)
trial_reports = st.builds(TrialReport, id=request_ids, event=trial_events())
closes = st.builds(CloseSession, id=request_ids, subject=idents, rig=idents, session=idents)
queries = st.builds(QueryState, id=request_ids, subject=idents)
pings = st.builds(Ping, id=request_ids)
requests = st.one_of(opens, trial_reports, closes, queries, pings)

decisions = st.builds(
    Decision,
    subject=idents,
    session=idents,
    trial=st.integers(1, 2**40),
    cue=st.one_of(st.none(), idents),
    reward_prob=st.floats(0, 1),
    reward_ul=st.floats(0, 1e4, allow_nan=False),
    reward_armed=st.booleans(),
    block=st.text(_chars, max_size=10),
    stage=st.text(_chars, max_size=10),
    end_session=st.booleans(),
    difficulty=st.one_of(st.none(), finite),
    valve_ms=st.one_of(st.none(), st.floats(0, 1e3, allow_nan=False)),
    reasons=st.lists(texts, max_size=3).map(tuple),
    overrides=st.lists(texts, max_size=2).map(tuple),
    warnings=st.lists(texts, max_size=2).map(tuple),
)

_leaf = st.one_of(st.none(), st.booleans(), st.integers(-(2**63), 2**64 - 1), finite, st.text(_chars, max_size=8))
_level3 = st.dictionaries(idents, _leaf, min_size=1, max_size=2)
_level2 = st.dictionaries(idents, st.one_of(_leaf, _level3), min_size=1, max_size=3)
states = st.dictionaries(idents, st.one_of(_leaf, _level2), max_size=4)

decision_replies = st.builds(DecisionReply, id=request_ids, decision=decisions, duplicate=st.booleans())
acks = st.builds(Ack, id=request_ids, of=st.sampled_from(sorted(REQUEST_TYPES)))
state_replies = st.builds(StateReply, id=request_ids, subject=idents, state=states)
pongs = st.builds(Pong, id=request_ids)
error_replies = st.builds(
    ErrorReply,
    id=st.one_of(st.none(), request_ids),
    code=st.sampled_from(sorted(ERROR_CODES)),
    message=st.text(_chars, max_size=60),
    field=st.one_of(st.none(), st.text(_chars, max_size=20)),
)
replies = st.one_of(decision_replies, acks, state_replies, pongs, error_replies)

"""Hypothesis strategies for store and table tests: valid TrialEvents and Decisions
covering every field (including awkward floats and optional fields)."""

from __future__ import annotations

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

idents = st.text(st.characters(whitelist_categories=("Ll", "Lu", "Nd"), whitelist_characters="_-."), min_size=1, max_size=12)
times = st.floats(min_value=0.0, max_value=1e4, allow_nan=False, allow_infinity=False)
anyfloat = st.floats(allow_nan=False, allow_infinity=False)
scalars = st.one_of(st.none(), st.booleans(), st.integers(-(2**53), 2**53), anyfloat,
                    st.text(max_size=20))


@st.composite
def cue_lists(draw) -> tuple[CuePresentation, ...]:
    names = draw(st.lists(idents, max_size=3, unique=True))
    out = []
    for name in names:
        a, b = sorted((draw(times), draw(times)))
        out.append(CuePresentation(name, a, b))
    return tuple(out)


@st.composite
def outcomes(draw) -> Outcome:
    reward = draw(st.one_of(st.just(0.0), st.floats(min_value=0.0, max_value=50.0)))
    reward_time = draw(times) if reward > 0 else draw(st.one_of(st.none(), times))
    punishment = draw(st.one_of(st.none(), st.sampled_from(PUNISHMENTS)))
    return Outcome(reward, reward_time, punishment, draw(st.one_of(st.none(), times)), draw(times))


responses = st.builds(
    Response,
    kind=idents,
    value=st.one_of(st.none(), anyfloat, idents),
    result=st.one_of(st.none(), st.sampled_from(RESPONSE_RESULTS)),
    latency=st.one_of(st.none(), times),
)


@st.composite
def events(draw, subject=None, session=None, trial=None) -> TrialEvent:
    return TrialEvent(
        subject=subject or draw(idents),
        rig=draw(idents),
        session=session or draw(idents),
        trial=trial or draw(st.integers(1, 10**6)),
        cues=draw(cue_lists()),
        outcome=draw(outcomes()),
        response=draw(responses),
        duration=None,
        wall_time=draw(st.floats(min_value=0.0, max_value=4e9)),
        extra=draw(st.dictionaries(idents, scalars, max_size=4)),
    )


@st.composite
def decisions(draw, subject: str, session: str, trial: int) -> Decision:
    texts = st.lists(st.text(max_size=30), max_size=3)
    return Decision(
        subject=subject,
        session=session,
        trial=trial,
        cue=draw(st.one_of(st.none(), idents)),
        reward_prob=draw(st.floats(0.0, 1.0)),
        reward_ul=draw(st.floats(0.0, 50.0)),
        reward_armed=draw(st.booleans()),
        block=draw(idents),
        stage=draw(idents),
        end_session=draw(st.booleans()),
        difficulty=draw(st.one_of(st.none(), anyfloat)),
        valve_ms=draw(st.one_of(st.none(), st.floats(0.0, 1e3))),
        reasons=tuple(draw(texts)),
        overrides=tuple(draw(texts)),
        warnings=tuple(draw(texts)),
    )


quantity_maps = st.dictionaries(
    st.text(st.characters(whitelist_categories=("Ll",), whitelist_characters="_"), min_size=1, max_size=10).filter(
        lambda s: s not in {"subject", "session", "trial", "seq"}),
    st.one_of(st.none(), anyfloat),
    max_size=6,
)

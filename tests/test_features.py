"""Trials become feature rows and rewards with the documented bin convention.

Hand-computed examples state their arithmetic beside them. dt = 0.25 s unless noted,
so bin b covers [0.25 b, 0.25 (b + 1)).
"""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from rigloop import CuePresentation, Outcome, TrialEvent
from rigloop.core.features import REPRESENTATIONS, CueList, make_representation
from rigloop.errors import BadArgument

CUES = CueList(["tone_hi", "tone_lo", "light"])


def rep(kind, **kw):
    return make_representation(kind, CUES, **kw)


# --------------------------------------------------------------------------- cue list


def test_cue_list_keeps_given_order_and_answers_membership():
    """Order is as given; index, len, iteration and `in` agree with it."""
    assert CUES.cues == ("tone_hi", "tone_lo", "light")
    assert [CUES.index(c) for c in CUES] == [0, 1, 2]
    assert len(CUES) == 3 and "light" in CUES and "noise" not in CUES


def test_cue_list_rejects_duplicates():
    """A cue named twice would give two columns one meaning."""
    message = r"^'cues' must be a list naming each cue once \(got 'a'\)$"
    with pytest.raises(BadArgument, match=message):
        CueList(["a", "b", "a"])


def test_unknown_cue_message_lists_allowed_cues():
    """The message names the unknown cue and lists the allowed ones (pinned)."""
    message = r"^'cue' must be one of tone_hi, tone_lo, light \(got 'noise'\)$"
    with pytest.raises(BadArgument, match=message):
        rep("presence").rows([("noise", 0.0, 1.0)])


# --------------------------------------------------------------------------- hand examples


def test_identity_row_is_sum_of_present_cues():
    """light + tone_hi present: [1, 0, 1]; r = 2.0 + 1.5 = 3.5 (total outcome), one row."""
    cues = [("light", 0.5, 1.0), ("tone_hi", 0.0, 1.0)]
    rows = rep("identity").rows(cues, [(1.0, 2.0), (1.2, 1.5)])
    np.testing.assert_array_equal(rows.X, [[1.0, 0.0, 1.0]])
    np.testing.assert_array_equal(rows.r, [3.5])
    assert rows.onset_steps == {"tone_hi": 0, "light": 0}
    assert not rep("identity").timed and rep("presence").timed


def test_presence_hand_example():
    """tone_hi on [0, 0.5) -> rows 0, 1; tone_lo on [0.25, 1.0) -> rows 1, 2, 3.
    Reward 2.0 at 1.0 s: bin floor(1.0 / 0.25) = 4, so r[4 - 1] = r[3] = 2.0; T = 1.0 / 0.25 = 4."""
    rows = rep("presence").rows([("tone_lo", 0.25, 1.0), ("tone_hi", 0.0, 0.5)], [(1.0, 2.0)])
    np.testing.assert_array_equal(rows.X, [[1, 0, 0], [1, 1, 0], [0, 1, 0], [0, 1, 0]])
    np.testing.assert_array_equal(rows.r, [0, 0, 0, 2.0])
    assert rows.onset_steps == {"tone_hi": 0, "tone_lo": 1}


def test_serial_compound_hand_example():
    """n_bins = 3. tone_hi on rows 0, 1 -> tone_hi@0, tone_hi@1 (columns 0, 1);
    tone_lo on rows 1, 2, 3 -> tone_lo@0, @1, @2 (columns 3 + 0, 1, 2 = 3, 4, 5)."""
    r = rep("serial_compound", n_bins=3)
    assert r.n_features == 9
    assert r.feature_names[:4] == ("tone_hi@0", "tone_hi@1", "tone_hi@2", "tone_lo@0")
    rows = r.rows([("tone_lo", 0.25, 1.0), ("tone_hi", 0.0, 0.5)], [(1.0, 2.0)])
    expected = np.zeros((4, 9))
    expected[0, 0] = expected[1, 1] = 1  # tone_hi@0, tone_hi@1
    expected[1, 3] = expected[2, 4] = expected[3, 5] = 1  # tone_lo@0..2
    np.testing.assert_array_equal(rows.X, expected)
    np.testing.assert_array_equal(rows.r, [0, 0, 0, 2.0])


def test_serial_compound_long_cue_keeps_last_bin_on():
    """A cue on for 6 bins with n_bins = 4 uses @0, @1, @2, @3, @3, @3 (documented)."""
    rows = rep("serial_compound", n_bins=4).rows([("light", 0.0, 1.5)])
    light = rows.X[:, 8:12]  # light is cue 2: columns 2 * 4 .. 2 * 4 + 3
    assert light.argmax(axis=1).tolist() == [0, 1, 2, 3, 3, 3]
    assert light.sum(axis=1).tolist() == [1] * 6


def test_trace_hand_example():
    """decay = 0.5: tone_hi from row 0: 1, 0.5, 0.25, 0.125; tone_lo from row 1: 0, 1, 0.5, 0.25
    (traces last to the end of the trial, whatever the offset)."""
    cues = [("tone_lo", 0.25, 0.5), ("tone_hi", 0.0, 0.25)]
    rows = rep("trace", decay=0.5).rows(cues, [(1.0, 1.0)])
    expected = [[1, 0], [0.5, 1], [0.25, 0.5], [0.125, 0.25]]
    np.testing.assert_array_equal(rows.X[:, :2], expected)
    assert not rows.X[:, 2].any()


def test_short_cue_occupies_its_onset_row():
    """A 0.05 s cue inside bin 2 (0.55-0.6 s) is still on in row 2."""
    rows = rep("presence").rows([("tone_hi", 0.55, 0.6)], duration=1.0)
    assert rows.X[:, 0].tolist() == [0, 0, 1, 0]


# --------------------------------------------------------------------------- reward alignment


@pytest.mark.parametrize(
    ("time", "dt", "index"),
    [
        (0.6, 0.25, 1),  # bin floor(2.4) = 2 -> r[1]
        (0.75, 0.25, 2),  # bin 3 exactly (grid-aligned) -> r[2]
        (0.3, 0.1, 2),  # 0.3 / 0.1 = 2.9999999999999996 in floats; epsilon puts it in bin 3 -> r[2]
        (0.0, 0.25, 0),  # bin 0: no earlier transition, documented to go to r[0]
        (0.1, 0.25, 0),  # bin 0 as well
        (1.0, 0.25, 3),  # bin 4 = T: at the end of the last row -> r[T - 1] = r[3]
    ],
)
def test_reward_lands_on_transition_into_its_bin(time, dt, index):
    """r[b - 1] gets an outcome in bin b; bin 0 -> r[0]; bin >= T -> r[T - 1].
    T = ceil(1.0 / dt)."""
    rows = rep("presence", dt=dt).rows([("tone_hi", 0.0, 0.5)], [(time, 3.0)], duration=1.0)
    expected = np.zeros(math.ceil(1.0 / dt - 1e-9))
    expected[index] = 3.0
    np.testing.assert_array_equal(rows.r, expected)


def test_reward_at_cue_offset_is_received_leaving_the_last_cue_bin():
    """CSC cue on [0.5, 1.5) = rows 2..5; reward at 1.5 s is bin 6, so r[5]: the transition
    out of the row whose cue@3 is on, into row 6 (cue off). The trial has T = 2.0/0.25 = 8 rows."""
    r = rep("serial_compound", n_bins=4)
    rows = r.rows([("tone_hi", 0.5, 1.5)], [(1.5, 1.0)], duration=2.0)
    assert rows.steps == 8
    assert rows.r.tolist() == [0, 0, 0, 0, 0, 1.0, 0, 0]
    assert rows.X[5, 3] == 1 and not rows.X[6].any()


def test_td_on_csc_rows_gives_the_discounted_weight_pattern():
    """Linear TD(0) (Sutton & Barto 2018, Ch. 9) trained on these rows, with the terminal zero
    row after the last, drives CSC weights to gamma^(L - 1 - j) (methods.md section 3 [C])."""
    gamma, alpha = 0.9, 0.2
    r = rep("serial_compound", n_bins=5)
    rows = r.rows([("tone_hi", 0.0, 1.25)], [(1.25, 1.0)])  # L = 5 cue bins, reward at offset
    X = np.vstack([rows.X, np.zeros(r.n_features)])  # append the terminal row
    w = np.zeros(r.n_features)
    for _ in range(500):
        for t in range(rows.steps):
            # delta_t = r_{t+1} + gamma w.x_{t+1} - w.x_t
            delta = rows.r[t] + gamma * X[t + 1] @ w - X[t] @ w
            w += alpha * delta * X[t]
    np.testing.assert_allclose(w[:5], gamma ** (4 - np.arange(5)), atol=1e-9)


# --------------------------------------------------------------------------- order, onset rows


@pytest.mark.parametrize("kind", REPRESENTATIONS)
def test_columns_do_not_depend_on_presentation_order(kind):
    """Listing the same cues in another order gives identical rows."""
    kw = {"serial_compound": {"n_bins": 3}, "trace": {"decay": 0.7}}.get(kind, {})
    r = rep(kind, **kw)
    a = r.rows([("tone_hi", 0.0, 0.5), ("light", 0.25, 1.0)], [(1.0, 1.0)])
    b = r.rows([("light", 0.25, 1.0), ("tone_hi", 0.0, 0.5)], [(1.0, 1.0)])
    np.testing.assert_array_equal(a.X, b.X)
    np.testing.assert_array_equal(a.r, b.r)
    assert list(a.onset_steps.items()) == list(b.onset_steps.items())


@pytest.mark.parametrize("kind", REPRESENTATIONS)
def test_onset_row_equals_the_row_of_a_lone_cue_at_onset(kind):
    """onset_row(cue) is the feature row at the onset step of that cue presented alone."""
    kw = {"serial_compound": {"n_bins": 3}, "trace": {"decay": 0.7}}.get(kind, {})
    r = rep(kind, **kw)
    rows = r.rows([("tone_lo", 0.5, 1.0)])
    np.testing.assert_array_equal(r.onset_row("tone_lo"), rows.X[rows.onset_steps["tone_lo"]])
    assert r.onset_row("tone_lo").sum() == 1.0


@pytest.mark.parametrize("kind", REPRESENTATIONS)
def test_shared_onset_rows_equal_onset_row_and_stay_read_only(kind):
    kw = {"serial_compound": {"n_bins": 3}, "trace": {"decay": 0.7}}.get(kind, {})
    r = rep(kind, **kw)
    for cue in CUES:
        x = r._onset(cue)
        assert x is r._onset(cue)
        np.testing.assert_array_equal(x, r.onset_row(cue))
        with pytest.raises(ValueError):
            x.setflags(write=True)
    with pytest.raises(BadArgument, match="'cue' must be one of"):
        r._onset("noise")


def test_rows_are_read_only_and_event_rows_match():
    """TrialRows is frozen through and through; a TrialEvent gives the same rows as its parts."""
    event = TrialEvent(
        subject="m01", rig="box1", session="s1", trial=1,
        cues=(CuePresentation("tone_hi", 0.0, 1.0),),
        outcome=Outcome(reward_ul=4.0, reward_time=1.0), duration=1.5,
    )  # fmt: skip
    r = rep("presence")
    rows = r.event_rows(event)
    same = r.rows([("tone_hi", 0.0, 1.0)], [(1.0, 4.0)], duration=1.5)
    np.testing.assert_array_equal(rows.X, same.X)
    np.testing.assert_array_equal(rows.r, same.r)
    assert rows.r.tolist() == [0, 0, 0, 4.0, 0, 0]  # T = 1.5/0.25 = 6; bin 4 -> r[3]
    with pytest.raises(ValueError):
        rows.X[0, 0] = 5.0


@pytest.mark.parametrize("kind", REPRESENTATIONS)
def test_jittered_times_in_the_same_bins_give_the_same_rows(kind):
    """Rows depend on times only through their bins: a jittered trial that bins alike gives
    equal rows (shared, and read-only for good); a trial that bins differently does not."""
    kw = {"serial_compound": {"n_bins": 3}, "trace": {"decay": 0.7}}.get(kind, {})
    r = rep(kind, **kw)
    a = r.rows([("tone_hi", 0.5, 1.5)], [(1.5, 1.0)], duration=2.5)
    b = r.rows([("tone_hi", 0.51, 1.49)], [(1.52, 1.0)], duration=2.43)
    np.testing.assert_array_equal(a.X, b.X)
    np.testing.assert_array_equal(a.r, b.r)
    assert a.onset_steps == b.onset_steps and a.onset_steps is not b.onset_steps
    for arr in (b.X, b.r):
        with pytest.raises(ValueError):
            arr.setflags(write=True)
    if kind != "identity":
        c = r.rows([("tone_hi", 0.75, 1.5)], [(1.5, 1.0)], duration=2.5)
        assert not np.array_equal(a.X, c.X)


def test_the_layout_cache_stays_bounded():
    """However many distinct layouts a representation sees, it keeps a bounded number."""
    from rigloop.core.features import _LAYOUTS_MAX

    r = rep("presence", dt=0.01)
    for k in range(3 * _LAYOUTS_MAX):
        r.rows([("tone_hi", 0.0, 0.01 * (k + 1))])
    assert 0 < len(r._layouts) <= _LAYOUTS_MAX
    rows = r.rows([("tone_hi", 0.0, 0.05)])
    assert rows.X[:, 0].tolist() == [1.0] * 5


def test_copies_of_a_representation_start_with_empty_caches():
    """Pickling or copying a representation keeps its value, not its cached rows (whose
    arrays a copy would otherwise hand out writable)."""
    import copy
    import pickle

    r = rep("serial_compound", n_bins=3)
    a = r.rows([("tone_hi", 0.0, 0.5)], [(0.5, 1.0)])
    r._onset("light")
    for other in (pickle.loads(pickle.dumps(r)), copy.deepcopy(r), copy.copy(r)):
        assert other == r and not other._layouts and not other._onsets
        b = other.rows([("tone_hi", 0.0, 0.5)], [(0.5, 1.0)])
        assert a.X.tobytes() == b.X.tobytes() and not b.X.flags.writeable


def test_step_rows_match_event_rows():
    """The rows step builds from a checked event equal event_rows with rewards in units."""
    event = TrialEvent(
        subject="m01", rig="box1", session="s1", trial=1,
        cues=(CuePresentation("light", 0.3, 1.0), CuePresentation("tone_hi", 0.0, 1.0)),
        outcome=Outcome(reward_ul=4.0, reward_time=1.1), duration=1.5,
    )  # fmt: skip
    for kind in REPRESENTATIONS:
        kw = {"serial_compound": {"n_bins": 3}, "trace": {"decay": 0.7}}.get(kind, {})
        r = rep(kind, **kw)
        a = r._event_rows(event, 2.0)
        b = r.rows([(c.cue, c.onset, c.offset) for c in event.cues], [(1.1, 2.0)], 1.5)
        assert a.X.tobytes() == b.X.tobytes() and a.r.tobytes() == b.r.tobytes()
        assert list(a.onset_steps.items()) == list(b.onset_steps.items())


# --------------------------------------------------------------------------- properties

cue_times = st.tuples(
    st.floats(0, 3, allow_nan=False), st.floats(0, 2, allow_nan=False)
).map(lambda t: (t[0], t[0] + t[1]))


@st.composite
def trials(draw):
    names = draw(st.lists(st.sampled_from(CUES.cues), unique=True, max_size=3))
    cues = [(n, *draw(cue_times)) for n in names]
    outcomes = draw(st.lists(st.tuples(st.floats(0, 5), st.floats(-2, 5)), max_size=3))
    dt = draw(st.sampled_from([0.05, 0.1, 0.25, 0.3]))
    return cues, outcomes, dt


@settings(max_examples=60, deadline=None)
@given(trials(), st.integers(1, 6))
def test_csc_has_one_active_feature_per_cue_per_bin_while_on(trial, n_bins):
    """Each present cue has exactly one CSC feature on in each row from its onset row to its
    last on row and none elsewhere; arrays are finite and rewards sum to the outcome total."""
    cues, outcomes, dt = trial
    r = rep("serial_compound", dt=dt, n_bins=n_bins)
    rows = r.rows(cues, outcomes)
    presence = rep("presence", dt=dt).rows(cues, outcomes)
    assert np.isfinite(rows.X).all() and np.isfinite(rows.r).all()
    assert rows.X.shape == (presence.X.shape[0], 3 * n_bins)
    per_cue = rows.X.reshape(rows.steps, 3, n_bins).sum(axis=2)  # (T, cues)
    np.testing.assert_array_equal(per_cue, presence.X)
    assert math.isclose(rows.r.sum(), math.fsum(a for _, a in outcomes), abs_tol=1e-9)
    for cue, onset, _ in cues:
        assert rows.onset_steps[cue] == math.floor(onset / dt + 1e-9)


# --------------------------------------------------------------------------- errors


def test_negative_onset_message_is_pinned():
    """A negative time names the cue's field and the bound."""
    message = r"^'cues\[tone_hi\].onset' must be a finite number >= 0 \(got -0.5\)$"
    with pytest.raises(BadArgument, match=message):
        rep("presence").rows([("tone_hi", -0.5, 1.0)])


@pytest.mark.parametrize(
    ("call", "argument"),
    [
        (lambda: rep("presence").rows([("tone_hi", 1.0, 0.5)]), "cues[tone_hi].offset"),
        (lambda: rep("presence").rows([("tone_hi", math.nan, 0.5)]), "cues[tone_hi].onset"),
        (lambda: rep("presence").rows([], [(math.inf, 1.0)]), "outcomes[0].time"),
        (lambda: rep("presence").rows([], [(1.0, math.nan)]), "outcomes[0].amount"),
        (lambda: rep("presence").rows([("tone_hi", 0, 1), ("tone_hi", 1, 2)]), "cues"),
        (lambda: rep("presence").rows([("tone_hi", 0.0, 2.0)], duration=1.0), "duration"),
        (lambda: rep("presence", dt=0.001).rows([("tone_hi", 0.0, 11.0)]), "duration"),
        (lambda: rep("presence", dt=0.0), "dt"),
        (lambda: rep("presence", dt=-1), "dt"),
        (lambda: rep("serial_compound"), "n_bins"),
        (lambda: rep("serial_compound", n_bins=0), "n_bins"),
        (lambda: rep("presence", n_bins=3), "n_bins"),
        (lambda: rep("trace", decay=1.0), "decay"),
        (lambda: rep("trace", decay=0.0), "decay"),
        (lambda: rep("trace"), "decay"),
        (lambda: rep("fourier"), "kind"),
    ],
)
def test_invalid_input_names_the_argument(call, argument):
    """Each bad input raises BadArgument carrying the argument's name."""
    with pytest.raises(BadArgument) as info:
        call()
    assert info.value.argument == argument


def test_dt_message_is_pinned():
    """A zero bin width names dt and its unit (pinned)."""
    message = r"^'dt' must be a finite number > 0 \(s per bin\) \(got 0.0\)$"
    with pytest.raises(BadArgument, match=message):
        rep("presence", dt=0.0)

"""Trial -> feature rows and rewards over time bins.

A trial is a few cues, each on from ``onset`` to ``offset`` (s from trial start), and
outcome events ``(time, amount)``. A :class:`Representation` turns it into a matrix of
feature rows ``X`` and a reward vector ``r`` that the learners consume; the columns come
from an explicit :class:`CueList`, so the column order never depends on the order in
which cues were presented.

Kinds (``REPRESENTATIONS``):

``identity``
    One row per trial: the compound of the cues present (sum of their one-hot rows), and
    ``r`` = the total outcome amount. For the reward learners (Rescorla-Wagner, Kalman).
``presence``
    One feature per cue, 1 in every time bin while the cue is on.
``serial_compound``
    Complete serial compound: one feature per (cue, bin since onset) while the cue is on,
    ``n_bins`` features per cue (Sutton & Barto 2018; Ludvig, Sutton & Kehoe 2012). A cue
    that stays on longer than ``n_bins * dt`` keeps its last feature (``cue@n_bins-1``) on
    for the rest of its presentation.
``trace``
    One feature per cue: ``decay ** (bins since onset)`` from the onset bin to the end of
    the trial, 0 before the onset.

Time-bin convention (timed kinds), written once here and pinned in the tests:

* Bin ``b`` covers ``[b*dt, (b+1)*dt)``; an event at time ``t`` falls in bin
  ``floor(t/dt + 1e-9)`` (the tiny epsilon makes ``0.3/0.1`` land in bin 3, not 2).
* Row ``t`` of ``X`` is the feature row of bin ``t``. There are ``T`` rows,
  ``T = max(1, ceil(duration/dt - 1e-9))``, extended if needed so that every cue has at
  least its onset row. The row after the last one is the terminal all-zero row; the
  learners append it themselves (the last update uses ``x_next = 0``).
* A cue is on in the rows ``onset_bin <= t < end_bin`` with ``onset_bin = bin(onset)``
  and ``end_bin = max(onset_bin + 1, ceil(offset/dt - 1e-9))``: a cue shorter than a bin
  still occupies its onset row.
* ``r[t]`` is the reward received on the transition from row ``t`` to row ``t+1``
  (the ``r_{t+1}`` of the TD error ``delta_t = r_{t+1} + gamma V(x_{t+1}) - V(x_t)``).
  An outcome at time ``tau`` in bin ``b = bin(tau)`` is added to ``r[b - 1]``: it is
  received on entering bin ``b``. An outcome in bin 0 (at the very start of the trial)
  goes to ``r[0]``; an outcome in bin ``T`` or later (at or after the end of the last
  row) goes to ``r[T-1]``, received on the transition into the terminal state.
* Consequence: a reward delivered exactly at a cue's offset (``tau = offset``,
  grid-aligned) lands in ``r[end_bin - 1]``, i.e. it is received on the transition *out
  of the cue's last on bin*. With CSC features a cue on for L bins then has its last
  feature paired directly with the reward, and TD training drives the weight of feature
  ``cue@j`` to ``gamma ** (L - 1 - j)`` (methods.md section 3).

All array work is vectorised (no Python loop over bins); this runs once per trial on
the hot path. A trial's rows depend only on its binned layout (cue onset and end bins,
outcome rows and amounts, T), so each representation keeps the rows of the layouts it
has seen in a small bounded cache; the arrays it hands out are read-only for good.
Invalid input raises :class:`rigloop.errors.BadArgument` naming the argument.
"""

from __future__ import annotations

import math
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any

import numpy as np

from ..errors import BadArgument

REPRESENTATIONS = ("identity", "presence", "serial_compound", "trace")
MAX_STEPS = 10_000  # a trial longer than this many bins is a unit mistake, not a trial
_EPS = 1e-9  # relative to one bin: absorbs float error in t/dt at bin edges
_LAYOUTS_MAX = 256  # binned trial layouts kept per representation (a task has a handful)


# --------------------------------------------------------------------------- cue list


@dataclass(frozen=True, slots=True)
class CueList:
    """The cues of a task in a fixed order: cue ``cues[i]`` owns column block ``i``.

    >>> CueList(["tone_hi", "light"]).index("light")
    1
    """

    cues: tuple[str, ...]
    _index: Mapping[str, int] = field(init=False, repr=False, compare=False)

    def __init__(self, cues: Sequence[str]):
        if isinstance(cues, str) or not isinstance(cues, Sequence):
            raise BadArgument("cues", "a sequence of cue ids", cues)
        cues = tuple(cues)
        for cue in cues:
            if not isinstance(cue, str) or not cue:
                raise BadArgument("cues", "a sequence of non-empty strings", cue)
        if len(set(cues)) != len(cues):
            twice = next(c for c in cues if cues.count(c) > 1)
            raise BadArgument("cues", "a list naming each cue once", twice)
        object.__setattr__(self, "cues", cues)
        object.__setattr__(self, "_index", {c: i for i, c in enumerate(cues)})

    def index(self, cue: str) -> int:
        """Column block of ``cue``; BadArgument names it and lists the allowed cues."""
        try:
            return self._index[cue]
        except (KeyError, TypeError):
            raise BadArgument("cue", f"one of {', '.join(self.cues) or '(no cues)'}", cue) from None

    def __len__(self) -> int:
        return len(self.cues)

    def __iter__(self) -> Iterator[str]:
        return iter(self.cues)

    def __contains__(self, cue: object) -> bool:
        return cue in self._index


# --------------------------------------------------------------------------- rows


@dataclass(frozen=True, slots=True)
class TrialRows:
    """One trial as learner input.

    X: (T, n) feature rows (T = 1 for ``identity``); read-only.
    r: (T,) rewards, ``r[t]`` received on the transition from row t to row t+1; read-only.
    onset_steps: cue -> index of the row at its onset (cues present in the trial only); a
    dict of its own, or a read-only mapping in the rows kept for ``step``.
    """

    X: np.ndarray
    r: np.ndarray
    onset_steps: dict[str, int]

    @property
    def steps(self) -> int:
        """Number of rows T (the terminal row is not included)."""
        return self.X.shape[0]


# --------------------------------------------------------------------------- checks


def _finite(name: str, value: Any, *, minimum: float | None = None) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float | np.integer | np.floating):
        raise BadArgument(name, "a finite number", value)
    value = float(value)
    if not math.isfinite(value) or (minimum is not None and value < minimum):
        expected = "a finite number" if minimum is None else f"a finite number >= {minimum:g}"
        raise BadArgument(name, expected, value)
    return value


# --------------------------------------------------------------------------- representation


@dataclass(frozen=True, slots=True)
class Representation:
    """A way of turning trials into feature rows; build with :func:`make_representation`.

    ``n_features``: identity / presence / trace: ``len(cues)``; serial_compound:
    ``len(cues) * n_bins`` with column ``i * n_bins + k`` for (cue i, bin k since onset).
    """

    kind: str
    cues: CueList
    dt: float
    n_bins: int | None = None
    decay: float | None = None
    # binned layout -> (X, r, onset steps); see _timed_rows
    _layouts: dict = field(default_factory=dict, init=False, repr=False, compare=False, hash=False)
    # cue -> (its read-only onset row, the feature it has on); see _onset_entry
    _onsets: dict = field(default_factory=dict, init=False, repr=False, compare=False, hash=False)

    def __getstate__(self) -> tuple:
        # the caches are not part of the value: a pickled or copied one starts empty
        return (self.kind, self.cues, self.dt, self.n_bins, self.decay)

    def __setstate__(self, state: tuple) -> None:
        for name, value in zip(("kind", "cues", "dt", "n_bins", "decay"), state, strict=True):
            object.__setattr__(self, name, value)
        object.__setattr__(self, "_layouts", {})
        object.__setattr__(self, "_onsets", {})

    @property
    def timed(self) -> bool:
        """False for ``identity`` (one row per trial), True for the per-bin kinds."""
        return self.kind != "identity"

    @property
    def n_features(self) -> int:
        if self.kind == "serial_compound":
            return len(self.cues) * self.n_bins
        return len(self.cues)

    @property
    def feature_names(self) -> tuple[str, ...]:
        """Column names: the cue id, or ``cue@k`` for CSC bin k (``tone_hi@3``)."""
        if self.kind == "serial_compound":
            return tuple(f"{c}@{k}" for c in self.cues for k in range(self.n_bins))
        return self.cues.cues

    def onset_row(self, cue: str) -> np.ndarray:
        """(n,) feature row of ``cue`` alone at its onset bin (a one-hot row for every kind).

        ``onset_row(cue) @ w`` is the cue's value at onset; ``x @ P @ x`` its variance.
        """
        x = np.zeros(self.n_features)
        x[self._onset_column(self.cues.index(cue))] = 1.0
        return x

    def _onset_column(self, i: int) -> int:
        """The feature an onset row of cue block ``i`` has on."""
        return i * self.n_bins if self.kind == "serial_compound" else i

    def _onset(self, cue: str) -> np.ndarray:
        """:meth:`onset_row` as a shared read-only array (one per cue), for the hot path."""
        return self._onset_entry(cue)[0]

    def _onset_entry(self, cue: str) -> tuple[np.ndarray, int]:
        """(:meth:`_onset`, the feature it has on) of ``cue``, made once per cue."""
        hit = self._onsets.get(cue)
        if hit is None:
            hit = self._onsets[cue] = (_locked(self.onset_row(cue)), self._onset_column(self.cues.index(cue)))
        return hit

    # -- trial -> rows ---------------------------------------------------------

    def rows(
        self,
        cues: Sequence[tuple[str, float, float]],
        outcomes: Sequence[tuple[float, float]] = (),
        duration: float | None = None,
    ) -> TrialRows:
        """Rows of one trial.

        cues: ``(cue_id, onset, offset)`` in s from trial start, each cue at most once.
        outcomes: ``(time, amount)``; amounts are finite (negative for punishment).
        duration: trial length in s, >= every event time; default the last event time.
        Returns TrialRows; see the module docstring for the bin and reward convention.
        """
        cols, onsets, offsets = self._check_cues(cues)
        times, amounts = self._check_outcomes(outcomes)
        last = max(max(offsets, default=0.0), max(times, default=0.0))
        if duration is None:
            duration = last
        else:
            duration = _finite("duration", duration, minimum=0.0)
            if duration < last:
                expected = f"a length covering every event (last at {last:g} s)"
                raise BadArgument("duration", expected, duration)

        if self.kind == "identity":
            return self._identity_rows(cols, amounts)
        return self._timed_rows(cols, onsets, offsets, times, amounts, duration)

    def _identity_rows(self, cols: list[int], amounts: list[float]) -> TrialRows:
        kept = self._identity_kept(cols, amounts)
        return TrialRows(kept.X, kept.r, dict(kept.onset_steps))

    def _identity_kept(self, cols: list[int], amounts: list[float]) -> TrialRows:
        """The kept rows of an identity trial: they depend only on its cues and the sum of
        its amounts (its sign too, which tells -0.0 from 0.0)."""
        total = math.fsum(amounts)
        key = (tuple(sorted(cols)), total, math.copysign(1.0, total))
        hit = self._layouts.get(key)
        if hit is None:
            X = np.zeros((1, self.n_features))
            X[0, cols] = 1.0
            r = np.array([total])
            hit = self._keep(key, X, r, tuple((self.cues.cues[c], 0) for c in key[0]))
        return hit

    def _timed_rows(
        self,
        cols: list[int],
        onsets: list[float],
        offsets: list[float],
        times: list[float],
        amounts: list[float],
        duration: float,
    ) -> TrialRows:
        """Rows of checked times: bin them, then build (or reuse) the rows of that layout.

        The rows depend on the times only through their bins, so jittered times that
        bin alike share one entry of a small per-representation cache.
        """
        kept = self._timed_kept(list(zip(cols, onsets, offsets, strict=True)), times, amounts, duration)
        return TrialRows(kept.X, kept.r, dict(kept.onset_steps))

    def _timed_kept(
        self,
        cues: list[tuple[int, float, float]],
        times: list[float],
        amounts: list[float],
        duration: float,
    ) -> TrialRows:
        """:meth:`_timed_rows` of cues ``(column block, onset, offset)``, as the kept value
        itself (its onset steps read-only)."""
        dt = self.dt
        if duration / dt > MAX_STEPS:
            expected = f"at most {MAX_STEPS} bins of dt = {dt:g} s long"
            raise BadArgument("duration", expected, duration)
        # onset bin floor(t/dt + eps); end bin max(ceil(offset/dt - eps), onset bin + 1)
        floor, ceil = math.floor, math.ceil
        binned = []
        last_end = 0
        for col, onset, offset in cues:
            on = floor(onset / dt + _EPS)
            end = max(ceil(offset / dt - _EPS), on + 1)
            binned.append((col, on, end))
            if end > last_end:
                last_end = end
        T = max(1, ceil(duration / dt - _EPS), last_end)
        # outcome at tau in bin b is received on the transition b-1 -> b: r[clip(b - 1, 0, T - 1)],
        # kept in the given order (it is the order their amounts are summed in)
        outcomes = []
        for t, amount in zip(times, amounts, strict=True):
            outcomes.append((min(max(floor(t / dt + _EPS) - 1, 0), T - 1), amount))
        # cues in cue-list order, whatever the presentation order
        binned.sort()
        layout = (tuple(binned), tuple(outcomes), T)
        hit = self._layouts.get(layout)
        if hit is None:
            hit = self._keep(layout, *self._build_rows(*layout))
        return hit

    def _keep(self, key: tuple, X: np.ndarray, r: np.ndarray, onset_steps: tuple[tuple[str, int], ...]) -> TrialRows:
        """Keep the rows of one layout (bounded): arrays locked, onset steps read-only."""
        kept = TrialRows(_locked(X), _locked(r), MappingProxyType(dict(onset_steps)))
        if len(self._layouts) >= _LAYOUTS_MAX:
            self._layouts.clear()
        self._layouts[key] = kept
        return kept

    def _build_rows(
        self, cues: tuple[tuple[int, int, int], ...], outcomes: tuple[tuple[int, float], ...], T: int
    ) -> tuple[np.ndarray, np.ndarray, tuple[tuple[str, int], ...]]:
        """X, r and the onset steps of one binned layout: cues ``(column block, onset bin,
        end bin)`` sorted by block, outcomes ``(row of r, amount)``."""
        cols = np.array([c for c, _, _ in cues], dtype=np.intp)
        on = np.array([b for _, b, _ in cues], dtype=np.intp)
        end = np.array([e for _, _, e in cues], dtype=np.intp)
        X = np.zeros((T, self.n_features))
        t = np.arange(T)[:, None]  # (T, 1) against (m,) present cues

        if self.kind == "presence":
            # X[t, i] = 1 while on_i <= t < end_i
            X[:, cols] = (t >= on) & (t < end)
        elif self.kind == "trace":
            # X[t, i] = decay ** (t - on_i) for t >= on_i, else 0
            since = t - on
            X[:, cols] = np.where(since >= 0, self.decay ** np.maximum(since, 0), 0.0)
        else:  # serial_compound
            # one active feature per on bin: column i*n_bins + min(t - on_i, n_bins - 1)
            lengths = end - on
            which = np.repeat(np.arange(len(cols)), lengths)
            since = np.arange(lengths.sum()) - np.repeat(np.cumsum(lengths) - lengths, lengths)
            column = cols[which] * self.n_bins + np.minimum(since, self.n_bins - 1)
            X[on[which] + since, column] = 1.0

        r = np.zeros(T)
        if outcomes:
            np.add.at(r, np.array([k for k, _ in outcomes], dtype=np.intp), np.array([a for _, a in outcomes]))
        onset_steps = tuple((self.cues.cues[c], b) for c, b, _ in cues)
        return X, r, onset_steps

    def event_rows(self, event: Any) -> TrialRows:
        """Rows of a :class:`rigloop.trial.TrialEvent` (its cues, reward and duration)."""
        cues = [(c.cue, c.onset, c.offset) for c in event.cues]
        return self.rows(cues, event.outcome_events(), event.duration)

    def _event_rows(self, event: Any, reward_unit: float, cues: Sequence[tuple[str, float, float]] | None = None,
                    punishments: Sequence[tuple[float, float]] = ()) -> TrialRows:
        """:meth:`event_rows` with rewards in units of ``reward_unit`` µL, for ``step``.

        ``cues``: ``(column name, onset, offset)`` to use instead of the event's own cues
        (action-value learners name a ``cue:action`` column); ``punishments``: further
        outcomes ``(time, value in reward units)``.

        A TrialEvent checked its times on construction (finite, >= 0, each offset after
        its onset, the duration covering every event), so only what it cannot know is
        checked here: that its cues are columns of this representation, that its
        scaled reward is finite, and (for timed kinds) that the trial is not too long.
        The rows it returns are the kept value itself (onset steps read-only): 3.6x the
        checked :meth:`rows` (tools/bench/step.py), which test_fast_paths holds it to.
        """
        times: list[float] = []
        amounts: list[float] = []
        for t, amount in event.outcome_events():
            times.append(t)
            amounts.append(amount / reward_unit)
        for t, value in punishments:
            times.append(t)
            amounts.append(value)
        if not all(map(math.isfinite, amounts)):
            if cues is None:
                cues = [(c.cue, c.onset, c.offset) for c in event.cues]
            return self.rows(cues, list(zip(times, amounts)), event.duration)
        index = self.cues.index
        cols = []
        if cues is None:  # the event's own cues (the common case: no list of tuples in between)
            for c in event.cues:
                cols.append((index(c.cue), c.onset, c.offset))
        else:
            for c, on, off in cues:
                cols.append((index(c), on, off))
        if self.kind == "identity":
            return self._identity_kept([col for col, _, _ in cols], amounts)
        return self._timed_kept(cols, times, amounts, event.duration)

    def _check_cues(
        self, cues: Sequence[tuple[str, float, float]]
    ) -> tuple[list[int], list[float], list[float]]:
        cols: list[int] = []
        onsets: list[float] = []
        offsets: list[float] = []
        seen: set[str] = set()
        for item in cues:
            if not isinstance(item, Sequence) or isinstance(item, str) or len(item) != 3:
                raise BadArgument("cues", "a sequence of (cue_id, onset, offset)", item)
            cue, onset, offset = item
            col = self.cues.index(cue)
            if cue in seen:
                raise BadArgument("cues", "each cue at most once per trial", cue)
            seen.add(cue)
            onset = _finite(f"cues[{cue}].onset", onset, minimum=0.0)
            offset = _finite(f"cues[{cue}].offset", offset, minimum=0.0)
            if offset < onset:
                expected = f"a time not before its onset {onset:g} s"
                raise BadArgument(f"cues[{cue}].offset", expected, offset)
            cols.append(col)
            onsets.append(onset)
            offsets.append(offset)
        return cols, onsets, offsets

    @staticmethod
    def _check_outcomes(outcomes: Sequence[tuple[float, float]]) -> tuple[list[float], list[float]]:
        times: list[float] = []
        amounts: list[float] = []
        for k, item in enumerate(outcomes):
            if not isinstance(item, Sequence) or isinstance(item, str) or len(item) != 2:
                raise BadArgument("outcomes", "a sequence of (time, amount)", item)
            times.append(_finite(f"outcomes[{k}].time", item[0], minimum=0.0))
            amounts.append(_finite(f"outcomes[{k}].amount", item[1]))
        return times, amounts


def _locked(a: np.ndarray) -> np.ndarray:
    """A read-only view of a read-only array: its write flag cannot be set back on."""
    a.setflags(write=False)
    view = a.view()
    view.setflags(write=False)
    return view


def make_representation(
    kind: str,
    cues: CueList,
    *,
    dt: float = 0.25,
    n_bins: int | None = None,
    decay: float | None = None,
) -> Representation:
    """Build a checked :class:`Representation`.

    kind: one of ``REPRESENTATIONS``. dt: bin width in s (> 0). n_bins: CSC bins per cue
    (whole number >= 1; required for, and only for, ``serial_compound``). decay: trace
    decay per bin in (0, 1) (required for, and only for, ``trace``).
    """
    if kind not in REPRESENTATIONS:
        raise BadArgument("kind", f"one of {', '.join(REPRESENTATIONS)}", kind)
    if not isinstance(cues, CueList):
        cues = CueList(cues)
    dt = _finite("dt", dt)
    if dt <= 0:
        raise BadArgument("dt", "a finite number > 0 (s per bin)", dt)
    if kind == "serial_compound":
        if isinstance(n_bins, bool) or not isinstance(n_bins, int | np.integer) or n_bins < 1:
            raise BadArgument("n_bins", "a whole number >= 1 for serial_compound", n_bins)
        n_bins = int(n_bins)
    elif n_bins is not None:
        raise BadArgument("n_bins", f"None for {kind} (it applies to serial_compound only)", n_bins)
    if kind == "trace":
        numeric = isinstance(decay, int | float | np.floating) and not isinstance(decay, bool)
        if not numeric or not 0 < decay < 1:
            raise BadArgument("decay", "a number in (0, 1) for trace", decay)
        decay = float(decay)
    elif decay is not None:
        raise BadArgument("decay", f"None for {kind} (it applies to trace only)", decay)
    return Representation(kind, cues, dt, n_bins, decay)

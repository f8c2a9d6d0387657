"""Read the policies of one block: [next_cue], [reward], [staircase] and [sprt].

Each reader gets the block's table and key path and returns its spec (or None where the
block has none), with every problem recorded on the reader.
"""

from __future__ import annotations

from . import expr as X
from .model import SEQUENTIAL_TESTS, CueSpec, NextCue, RewardPolicy, Sprt, Staircase
from .read_cues import cue_context
from .reader import Reader, show

NEXT_CUE_KEYS = {
    "sequence": ["policy", "sequence"],
    "balanced": ["policy", "repeats", "max_run"],
    "weighted": ["policy", "weights"],
    "uncertain": ["policy"],
    "counter_bias": ["policy", "window", "max_p"],
}
# old policy names that still load, with a warning in `rigloop check`, for one release
DEPRECATED_POLICIES = {"anti_bias": "counter_bias"}


def read_next_cue(r: Reader, b: dict, path: str, bcues: tuple[str, ...], cues: dict[str, CueSpec]) -> NextCue:
    """The block's cue order; without a table, balanced over two or more cues, else the one cue."""
    npath = f"{path}.next_cue"
    t = r.table(b, "next_cue", npath)
    if t is None:
        t = {"policy": "balanced"} if len(bcues) > 1 else {"policy": "sequence", "sequence": list(bcues)}
    written = t.get("policy")
    t = _renamed(r, t, npath)
    kind = r.text(t, "policy", f"{npath}.policy", choices=tuple(NEXT_CUE_KEYS), required=True) or "balanced"
    r.keys(t, NEXT_CUE_KEYS[kind], npath)
    if kind == "sequence":
        return _sequence(r, t, npath, bcues)
    if kind == "balanced":
        return _balanced(r, t, npath, bcues)
    if kind == "weighted":
        return _weighted(r, t, npath, bcues)
    if kind == "counter_bias":
        return _counter_bias(r, t, npath, bcues, cues, old_name=written == "anti_bias")
    return NextCue(kind)


def _lost_cues(r: Reader, npath: str) -> str | None:
    """The problem that took cues out of this policy's block, if one did."""
    return r.cause(f"cues_of:{npath.removesuffix('.next_cue')}")


def _renamed(r: Reader, t: dict, npath: str) -> dict:
    """The next-cue table with a deprecated policy name replaced by its new one, and a note
    that says so (the file still loads, for one release)."""
    old = t.get("policy")
    if not isinstance(old, str) or old not in DEPRECATED_POLICIES:
        return t
    new = DEPRECATED_POLICIES[old]
    r.note(f"{npath}.policy", f"'{old}' is the old name of the policy '{new}' and will stop loading in the next "
                              f"release; write policy = \"{new}\" (it behaves the same)")
    return {**t, "policy": new}


def _sequence(r: Reader, t: dict, npath: str, bcues: tuple[str, ...]) -> NextCue:
    seq = t.get("sequence", list(bcues))
    if not isinstance(seq, list) or not seq or not all(isinstance(c, str) for c in seq):
        r.add(f"{npath}.sequence", f"must be a non-empty list of cue ids (got {show(seq)})",
              follows=None if bcues else _lost_cues(r, npath))
        seq = list(bcues)
    for c in seq:
        if c not in bcues:
            r.add(f"{npath}.sequence", f"'{c}' is not a cue of this block (cues: {', '.join(bcues)})",
                  follows=r.cause(f"cue:{c}"))
    return NextCue("sequence", sequence=tuple(seq))


def _balanced(r: Reader, t: dict, npath: str, bcues: tuple[str, ...]) -> NextCue:
    if len(bcues) < 2:
        r.add(f"{npath}.policy", "'balanced' needs at least two cues in the block; use 'sequence'",
              follows=_lost_cues(r, npath))
    repeats = r.num(t, "repeats", f"{npath}.repeats", 1, lo=1, hi=50, integer=True)
    max_run = r.num(t, "max_run", f"{npath}.max_run", 3, lo=1, hi=50, integer=True)
    return NextCue("balanced", repeats=repeats, max_run=max_run)


def _weighted(r: Reader, t: dict, npath: str, bcues: tuple[str, ...]) -> NextCue:
    w = t.get("weights")
    pairs: list[tuple[str, float]] = []
    if not isinstance(w, dict):
        r.add(f"{npath}.weights", f"must be a table of cue = weight (got {show(w)})")
        return NextCue("weighted", weights=tuple(pairs))
    for c in bcues:
        if c not in w:
            r.add(f"{npath}.weights", f"gives no weight for cue '{c}' of this block")
    for c in w:
        if c not in bcues:
            r.add(f"{npath}.weights.{c}", f"'{c}' is not a cue of this block (cues: {', '.join(bcues)})",
                  follows=r.cause(f"cue:{c}"))
            continue
        v = r.num(w, c, f"{npath}.weights.{c}", None, lo=0, hi=1e6)
        if v is not None:
            pairs.append((c, v))
    if pairs and sum(v for _, v in pairs) <= 0:
        r.add(f"{npath}.weights", "must have a positive total")
    return NextCue("weighted", weights=tuple(pairs))


def _counter_bias(r: Reader, t: dict, npath: str, bcues: tuple[str, ...], cues: dict[str, CueSpec],
                  old_name: bool = False) -> NextCue:
    """Two-choice: offer the side the animal under-chooses more often. A file that says the
    old name ``anti_bias`` keeps that kind tag, whose reasons read "anti-bias", so sessions
    stored with it still replay word for word; ``counter_bias`` reads "counter-bias"."""
    sides = {cues[c].role for c in bcues if c in cues}
    if not {"left", "right"} <= sides:
        r.add(f"{npath}.policy", "'counter_bias' needs cues with role = \"left\" and role = \"right\" in the block")
    window = r.num(t, "window", f"{npath}.window", 10, lo=1, hi=500, integer=True)
    max_p = r.num(t, "max_p", f"{npath}.max_p", 0.8, lo=0.5, hi=1.0)
    return NextCue("anti_bias" if old_name else "counter_bias", window=window, max_p=max_p)


def read_reward(r: Reader, b: dict, path: str, cues) -> RewardPolicy:
    rpath = f"{path}.reward"
    t = r.table(b, "reward", rpath)
    if t is None:
        return RewardPolicy("fixed")
    kind = r.text(t, "policy", f"{rpath}.policy", "fixed", choices=("fixed", "thinning")) or "fixed"
    if kind == "fixed":
        r.keys(t, ["policy"], rpath)
        return RewardPolicy("fixed")
    r.keys(t, ["policy", "floor", "certainty"], rpath)
    floor = r.num(t, "floor", f"{rpath}.floor", None, lo=0, hi=1, required=True)
    ctx = cue_context(cues, cue_var=True)
    certainty = r.expr(t, "certainty", f"{rpath}.certainty", ctx, X.NUM)
    if "certainty" not in t:
        certainty = X.parse("p_value_above(cue, 0.5)", ctx, X.NUM)
    return RewardPolicy("thinning", floor if floor is not None else 0.0, certainty)


def read_staircase(r: Reader, b: dict, path: str) -> Staircase | None:
    spath = f"{path}.staircase"
    t = r.table(b, "staircase", spath)
    if t is None:
        return None
    r.keys(t, ["parameter", "start", "down", "up", "step_harder", "step_easier", "min", "max", "harder"], spath)
    param = r.text(t, "parameter", f"{spath}.parameter", required=True) or "difficulty"
    if not param.isidentifier():
        r.add(f"{spath}.parameter", f"must be a plain name such as contrast (got {param!r})")
    lo = r.num(t, "min", f"{spath}.min", 0.0)
    hi = r.num(t, "max", f"{spath}.max", 1.0)
    if lo >= hi:
        r.add(f"{spath}.min", f"{X.fmt(lo)} must be below max {X.fmt(hi)}")
    start = r.num(t, "start", f"{spath}.start", hi, required=True)
    if not lo <= start <= hi:
        r.add(f"{spath}.start", f"{X.fmt(start)} is outside [min, max] = [{X.fmt(lo)}, {X.fmt(hi)}]")
    span = max(hi - lo, 1e-12)
    return Staircase(
        parameter=param,
        start=start,
        down=r.num(t, "down", f"{spath}.down", 2, lo=1, hi=8, integer=True),
        up=r.num(t, "up", f"{spath}.up", 1, lo=1, hi=8, integer=True),
        step_harder=r.num(t, "step_harder", f"{spath}.step_harder", span / 20, lo=0, lo_open=True, hi=span),
        step_easier=r.num(t, "step_easier", f"{spath}.step_easier", span / 20, lo=0, lo_open=True, hi=span),
        lo=lo,
        hi=hi,
        harder=r.text(t, "harder", f"{spath}.harder", "lower", choices=("lower", "higher")) or "lower",
    )


def read_sprt(r: Reader, b: dict, path: str, bcues: tuple[str, ...]) -> Sprt | None:
    spath = f"{path}.sprt"
    t = r.table(b, "sprt", spath)
    if t is None:
        return None
    r.keys(t, ["test", "p0", "p1", "alpha", "beta", "horizon", "cond"], spath)
    if "test" in t:
        test = r.text(t, "test", f"{spath}.test", None, choices=SEQUENTIAL_TESTS)
    else:
        # a table with Wald's beta and no test is a rule file written before the CUSUM default
        # (stored sessions keep loading): it keeps Wald's test, now restarting after an H0 acceptance
        test = "wald" if "beta" in t else "cusum"
    p0 = r.num(t, "p0", f"{spath}.p0", 0.5, lo=0, hi=1, lo_open=True, hi_open=True, required=True)
    p1 = r.num(t, "p1", f"{spath}.p1", 0.8, lo=0, hi=1, lo_open=True, hi_open=True, required=True)
    if p1 <= p0:
        r.add(f"{spath}.p1", f"{X.fmt(p1)} must be above p0 {X.fmt(p0)} (H1 is 'performing at p1')")
    alpha = r.num(t, "alpha", f"{spath}.alpha", 0.05, lo=0, hi=0.5, lo_open=True, hi_open=True)
    # beta only for wald, horizon only for cusum (with an unknown test, reported above, only their ranges)
    beta, horizon = 0.2, 2000
    if "beta" in t and test not in (None, "wald"):
        r.add(f"{spath}.beta", f'is allowed only with test = "wald" (this test is "{test}", which has no '
                               "'performing at p0' boundary and so no miss rate)")
    else:
        beta = r.num(t, "beta", f"{spath}.beta", beta, lo=0, hi=0.5, lo_open=True, hi_open=True)
    if "horizon" in t and test not in (None, "cusum"):
        r.add(f"{spath}.horizon", f'is allowed only with test = "cusum" (this test is "{test}"; only the '
                                  "CUSUM states its guarantee over a horizon of trials)")
    else:
        horizon = r.num(t, "horizon", f"{spath}.horizon", horizon, lo=10, hi=10_000_000, integer=True)
    cond = r.text(t, "cond", f"{spath}.cond", "all")
    if cond != "all" and cond not in bcues:
        r.add(f"{spath}.cond", f"must be all or a cue of this block (cues: {', '.join(bcues)}; got {cond!r})",
              follows=r.cause(f"cue:{cond}"))
    return Sprt(p0, p1, test or "cusum", alpha, beta, horizon, cond or "all")

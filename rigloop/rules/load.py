"""Rule file (TOML) -> validated specs, reporting every problem at once.

Each problem names its key path (``stages.acquisition.blocks.a1.end.when``); an
expression problem also shows the expression with a caret under the fault and what
is allowed there. ``load_rules`` is pure; ``load_rules_file`` and ``load_example`` are
the only functions here that read files.

The file format is described in the README section "Rule files"; in short::

    name = "..."                 reward_unit_ul = 4.0       first_stage = "..."
    [learner]      model = "kalman_td", gamma = ..., ...
    [features]     kind = "serial_compound", dt = 0.25, n_bins = 8
    [performance]  chance = 0.5, sigma2 = 0.05
    [behaviour]    sigma2 = 0.2, prior_var = 2.0   (the per-cue estimate of what the animal does)
    [outcomes]     timeout = -0.5, airpuff = -1.0, noise = -0.25   (reward units)
    [response_model]  beta, theta, lapse, bias, persev, decay
    [cues]         tone_hi = { role = "go" }
    [stages.S]     first_block, advance = {when, to}, step_back = {when, to}, new_session
    [stages.S.blocks.B]  contingency, next_cue, reward, staircase, sprt, end
    [session_end]  name = "expression"
    [welfare]      limits (see welfare.py)
"""

from __future__ import annotations

import hashlib
import keyword
import math
import tomllib
from importlib import resources
from pathlib import Path
from typing import Any

from ..errors import RuleError
from . import expr as X
from .model import (
    CUE_ROLES,
    FEATURE_KINDS,
    LEARNERS,
    REWARD_LEARNERS,
    SEQUENTIAL_TESTS,
    VALUE_KINDS,
    BehaviourSpec,
    Block,
    BlockEnd,
    Contingency,
    CueSpec,
    FeatureSpec,
    LearnerSpec,
    Move,
    NextCue,
    OutcomeValues,
    PerformanceSpec,
    ResponseSpec,
    RewardPolicy,
    SessionEnd,
    Spec,
    Sprt,
    Stage,
    Staircase,
)
from .welfare import parse_limits

MAX_STAGES = 32
MAX_BLOCKS = 32
MAX_CUES = 32

# learner -> {param: (default, lo, hi, lo_open)}
LEARNER_PARAMS: dict[str, dict[str, tuple[float, float, float, bool]]] = {
    "rescorla_wagner": {"alpha": (0.1, 0.0, 1.0, True)},
    "kalman_filter": {
        "diffusion": (0.01, 0.0, 10.0, False),
        "noise": (1.0, 0.0, 100.0, True),
        "prior_var": (1.0, 0.0, 100.0, True),
    },
    "td": {"alpha": (0.1, 0.0, 1.0, True), "gamma": (0.95, 0.0, 1.0, False), "lam": (0.0, 0.0, 1.0, False)},
    "kalman_td": {
        "gamma": (0.95, 0.0, 1.0, False),
        "diffusion": (0.01, 0.0, 10.0, False),
        "noise": (1.0, 0.0, 100.0, True),
        "prior_var": (1.0, 0.0, 100.0, True),
    },
}
_RESERVED = set(X.NAMES) | set(X.FUNCTIONS) | {"all", "cue"}


class _Reader:
    """Typed getters over TOML tables that record problems instead of raising."""

    def __init__(self) -> None:
        self.problems: list[str] = []

    def add(self, path: str, msg: str) -> None:
        self.problems.append(f"{path}: {msg}")

    def keys(self, table: dict, allowed: list[str], path: str) -> None:
        for key in table:
            if key not in allowed:
                self.add(f"{path}.{key}" if path else key, f"unknown key (allowed: {', '.join(allowed)})")

    def table(self, parent: dict, key: str, path: str, required: bool = False) -> dict | None:
        v = parent.get(key)
        if v is None:
            if required:
                self.add(path, "is missing (a table)")
            return None
        if not isinstance(v, dict):
            self.add(path, f"must be a table (got {_show(v)})")
            return None
        return v

    def num(self, t: dict, key: str, path: str, default: Any = None, *, lo: float = -math.inf,
            hi: float = math.inf, lo_open: bool = False, hi_open: bool = False, integer: bool = False,
            required: bool = False) -> Any:
        if key not in t:
            if required:
                self.add(path, "is missing")
            return default
        v = t[key]
        kind = "whole number" if integer else "number"
        ok = isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)
        if ok and integer:
            ok = float(v) == int(v)
        in_range = ok and (v > lo if lo_open else v >= lo) and (v < hi if hi_open else v <= hi)
        if not in_range:
            self.add(path, f"must be a {kind} {_range_text(lo, hi, lo_open, hi_open)} (got {_show(v)})")
            return default
        return int(v) if integer else float(v)

    def text(self, t: dict, key: str, path: str, default: str | None = None, *, choices: tuple | None = None,
             required: bool = False) -> str | None:
        if key not in t:
            if required:
                self.add(path, "is missing" + (f" (one of: {', '.join(choices)})" if choices else ""))
            return default
        v = t[key]
        if not isinstance(v, str):
            self.add(path, f"must be a string (got {_show(v)})")
            return default
        if choices is not None and v not in choices:
            self.add(path, f"must be one of {', '.join(choices)} (got {v!r})")
            return default
        return v

    def expr(self, t: dict, key: str, path: str, ctx: X.Context, expect: str = X.BOOL,
             required: bool = False) -> X.Expr | None:
        if key not in t:
            if required:
                self.add(path, "is missing (an expression)")
            return None
        v = t[key]
        if expect == X.NUM and isinstance(v, (int, float)) and not isinstance(v, bool):
            v = repr(float(v))
        try:
            return X.parse(v, ctx, expect)
        except X.ExprError as err:
            self.problems.extend(err.render(path))
            return None


def _range_text(lo, hi, lo_open, hi_open) -> str:
    if lo == -math.inf and hi == math.inf:
        return ""
    if hi == math.inf:
        return f"{'>' if lo_open else '>='} {X.fmt(lo)}"
    if lo == -math.inf:
        return f"{'<' if hi_open else '<='} {X.fmt(hi)}"
    return f"in {'(' if lo_open else '['}{X.fmt(lo)}, {X.fmt(hi)}{')' if hi_open else ']'}"


def _show(v: Any) -> str:
    s = repr(v)
    return s if len(s) <= 60 else s[:57] + "..."


# --------------------------------------------------------------------------- entry points


def load_rules(text: str, source: str = "<string>"):
    """Parse and validate a rule file's text; raise RuleError listing every problem."""
    from .ruleset import Rules

    if not isinstance(text, str):
        raise RuleError([f"rule text must be a string (got {type(text).__name__})"], source)
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise RuleError([f"not valid TOML: {err}"], source) from None
    spec, problems = parse_spec(data)
    if problems:
        raise RuleError(problems, source)
    return Rules(spec=spec, text=text, sha256=hashlib.sha256(text.encode("utf-8")).hexdigest(), source=source)


def load_rules_file(path):
    """Read a rule file from disk (UTF-8) and load it; the source in errors is the path."""
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as err:
        raise RuleError([f"cannot read the rule file: {err}"], str(p)) from None
    return load_rules(text, source=str(p))


def example_names() -> list[str]:
    """Names of the rule files shipped in ``rigloop/examples``."""
    root = resources.files("rigloop.examples")
    return sorted(f.name[:-5] for f in root.iterdir() if f.name.endswith(".toml"))


def example_text(name: str) -> str:
    names = example_names()
    if name not in names:
        raise RuleError([f"no example named {name!r} (examples: {', '.join(names)})"], name)
    return resources.files("rigloop.examples").joinpath(f"{name}.toml").read_text(encoding="utf-8")


def load_example(name: str):
    """Load a shipped example rule file by name, e.g. ``load_example("tone_reversal")``."""
    return load_rules(example_text(name), source=f"example:{name}")


def load_any(name_or_path: str):
    """A path when one exists (or it ends in .toml), else a shipped example's name."""
    p = Path(name_or_path)
    if p.suffix == ".toml" or p.exists():
        return load_rules_file(p)
    return load_example(name_or_path)


# --------------------------------------------------------------------------- the spec


TOP_KEYS = ["name", "description", "reward_unit_ul", "first_stage", "learner", "features", "performance",
            "behaviour", "outcomes", "response_model", "cues", "stages", "session_end", "welfare"]


def parse_spec(data: dict) -> tuple[Spec | None, list[str]]:
    """Build the spec from parsed TOML; return (spec or None, problems)."""
    r = _Reader()
    r.keys(data, TOP_KEYS, "")
    name = r.text(data, "name", "name", required=True) or "unnamed"
    description = r.text(data, "description", "description", "") or ""
    unit = r.num(data, "reward_unit_ul", "reward_unit_ul", 1.0, lo=0, lo_open=True, hi=1000, required=True)
    learner = _learner(r, data)
    features = _features(r, data, learner)
    perf_t = r.table(data, "performance", "performance") or {}
    r.keys(perf_t, ["chance", "sigma2"], "performance")
    performance = PerformanceSpec(
        chance=r.num(perf_t, "chance", "performance.chance", 0.5, lo=0, hi=1, lo_open=True, hi_open=True),
        sigma2=r.num(perf_t, "sigma2", "performance.sigma2", 0.05, lo=0, lo_open=True, hi=10),
    )
    behaviour, outcomes, response = _behaviour(r, data), _outcomes(r, data), _response_model(r, data)
    cues = _cues(r, data)
    welfare, wp = parse_limits(data.get("welfare"), "welfare")
    r.problems.extend(wp)
    stages = _stages(r, data, cues, welfare)
    first_stage = r.text(data, "first_stage", "first_stage")
    if first_stage is None:
        first_stage = next(iter(stages), "")
    elif first_stage not in stages:
        r.add("first_stage", f"no stage named {first_stage!r} (stages: {', '.join(stages)})")
    session_end = _session_end(r, data, cues)
    _check_graph(r, stages, first_stage)
    if stages and not any(b.rewarded_cues() for s in stages.values() for b in s.blocks.values()):
        r.add("stages", "no block rewards any cue; a water-restricted animal must be able to earn water")
    if r.problems:
        return None, r.problems
    spec = Spec(
        name=name, description=description, reward_unit_ul=unit, learner=learner, features=features,
        performance=performance, cues=cues, stages=stages, first_stage=first_stage,
        session_end=tuple(session_end), welfare=welfare, behaviour=behaviour, outcomes=outcomes, response=response,
    )
    return spec, []


def _behaviour(r: _Reader, data: dict) -> BehaviourSpec:
    t = r.table(data, "behaviour", "behaviour") or {}
    r.keys(t, ["sigma2", "prior_var"], "behaviour")
    d = BehaviourSpec()
    return BehaviourSpec(
        sigma2=float(r.num(t, "sigma2", "behaviour.sigma2", d.sigma2, lo=0, lo_open=True, hi=5)),
        prior_var=float(r.num(t, "prior_var", "behaviour.prior_var", d.prior_var, lo=0, lo_open=True, hi=25)),
    )


def _outcomes(r: _Reader, data: dict) -> OutcomeValues:
    t = r.table(data, "outcomes", "outcomes") or {}
    names = ["timeout", "airpuff", "noise"]
    r.keys(t, names, "outcomes")
    d = OutcomeValues()
    vals = {k: float(r.num(t, k, f"outcomes.{k}", getattr(d, k), lo=-10, hi=0)) for k in names}
    return OutcomeValues(**vals)


def _response_model(r: _Reader, data: dict) -> ResponseSpec:
    t = r.table(data, "response_model", "response_model") or {}
    r.keys(t, ["beta", "theta", "lapse", "bias", "persev", "decay"], "response_model")
    d = ResponseSpec()

    def get(key: str, **bounds) -> float | None:
        v = r.num(t, key, f"response_model.{key}", getattr(d, key), **bounds)
        return None if v is None else float(v)

    return ResponseSpec(beta=get("beta", lo=0, hi=100), theta=get("theta", lo=-10, hi=10),
                        lapse=get("lapse", lo=0, hi=1, hi_open=True), bias=get("bias", lo=-10, hi=10),
                        persev=get("persev", lo=-10, hi=10), decay=get("decay", lo=0, hi=1, hi_open=True))


def _learner(r: _Reader, data: dict) -> LearnerSpec:
    t = r.table(data, "learner", "learner", required=True) or {}
    model = r.text(t, "model", "learner.model", choices=LEARNERS, required=True) or "rescorla_wagner"
    table = LEARNER_PARAMS[model]
    r.keys(t, ["model", "values", *table], "learner")
    values = r.text(t, "values", "learner.values", "cue", choices=VALUE_KINDS) or "cue"
    params: dict[str, Any] = {}
    for key, (default, lo, hi, lo_open) in table.items():
        path = f"learner.{key}"
        v = t.get(key, default)
        if key == "alpha" and isinstance(v, list):
            items = [r.num({key: x}, key, f"{path}[{i}]", default, lo=lo, hi=hi, lo_open=lo_open)
                     for i, x in enumerate(v)]
            params[key] = [float(x) for x in items]
        else:
            params[key] = r.num({key: v}, key, path, default, lo=lo, hi=hi, lo_open=lo_open)
    return LearnerSpec(model, params, values)


def _features(r: _Reader, data: dict, learner: LearnerSpec) -> FeatureSpec:
    t = r.table(data, "features", "features")
    if t is None:
        t = {"kind": "identity" if learner.name in REWARD_LEARNERS else "serial_compound"}
        if learner.name not in REWARD_LEARNERS:
            r.add("features", f"is missing: learner '{learner.name}' needs timed features "
                              "(kind = presence, serial_compound or trace)")
    kind = r.text(t, "kind", "features.kind", choices=FEATURE_KINDS, required=True) or "identity"
    allowed = {"identity": ["kind"], "presence": ["kind", "dt"], "serial_compound": ["kind", "dt", "n_bins"],
               "trace": ["kind", "dt", "n_bins", "decay"]}[kind]
    r.keys(t, allowed, "features")
    dt = r.num(t, "dt", "features.dt", 0.25, lo=0.001, hi=5.0)
    n_bins = r.num(t, "n_bins", "features.n_bins", None, lo=1, hi=256, integer=True,
                   required=kind == "serial_compound")
    decay = r.num(t, "decay", "features.decay", None, lo=0, hi=1, lo_open=True, hi_open=True,
                  required=kind == "trace")
    if kind == "identity" and learner.name not in REWARD_LEARNERS:
        r.add("features.kind", f"'identity' features give one row per trial; learner '{learner.name}' "
                               "learns over time steps and needs presence, serial_compound or trace")
    if kind != "identity" and learner.name in REWARD_LEARNERS:
        r.add("features.kind", f"'{kind}' features are timed; learner '{learner.name}' learns one reward per "
                               "trial and needs kind = \"identity\"")
    return FeatureSpec(kind, dt, n_bins, decay)


def _choice_cues(cues: dict[str, CueSpec]) -> frozenset[str]:
    return frozenset(c for c, k in cues.items() if k.role in ("left", "right"))


def _cues(r: _Reader, data: dict) -> dict[str, CueSpec]:
    t = r.table(data, "cues", "cues", required=True) or {}
    if len(t) > MAX_CUES:
        r.add("cues", f"at most {MAX_CUES} cues (got {len(t)})")
    out: dict[str, CueSpec] = {}
    for name, v in t.items():
        path = f"cues.{name}"
        if not name.isidentifier() or keyword.iskeyword(name) or not name.isascii() or len(name) > 64:
            r.add(path, "a cue id must be a plain identifier (letters, digits, _; not starting with a digit)")
            continue
        if name in _RESERVED:
            r.add(path, f"'{name}' is a name of the expression language; choose another cue id")
            continue
        if isinstance(v, str):
            v = {"role": v}
        if not isinstance(v, dict):
            r.add(path, f"must be a role string or a table {{ role, label }} (got {_show(v)})")
            continue
        r.keys(v, ["role", "label"], path)
        role = r.text(v, "role", f"{path}.role", "plain", choices=CUE_ROLES) or "plain"
        label = r.text(v, "label", f"{path}.label", "") or ""
        out[name] = CueSpec(name, role, label)
    if not t:
        r.add("cues", "declare at least one cue")
    return out


BLOCK_KEYS = ["contingency", "next_cue", "reward", "staircase", "sprt", "end"]
STAGE_KEYS = ["first_block", "advance", "step_back", "new_session", "blocks"]


def _stages(r: _Reader, data: dict, cues: dict[str, CueSpec], welfare) -> dict[str, Stage]:
    t = r.table(data, "stages", "stages", required=True) or {}
    if not t:
        r.add("stages", "define at least one stage")
    if len(t) > MAX_STAGES:
        r.add("stages", f"at most {MAX_STAGES} stages (got {len(t)})")
    names = list(t)
    out: dict[str, Stage] = {}
    ctx = X.Context(tuple(cues), choice_cues=_choice_cues(cues))
    for i, (sname, st) in enumerate(t.items()):
        path = f"stages.{sname}"
        if not isinstance(st, dict):
            r.add(path, "must be a table")
            continue
        r.keys(st, STAGE_KEYS, path)
        bt = r.table(st, "blocks", f"{path}.blocks", required=True) or {}
        if len(bt) > MAX_BLOCKS:
            r.add(f"{path}.blocks", f"at most {MAX_BLOCKS} blocks (got {len(bt)})")
        bnames = list(bt)
        blocks: dict[str, Block] = {}
        for j, (bname, b) in enumerate(bt.items()):
            bpath = f"{path}.blocks.{bname}"
            if not isinstance(b, dict):
                r.add(bpath, "must be a table")
                continue
            default_next = bnames[(j + 1) % len(bnames)]
            blk = _block(r, b, bpath, bname, bnames, default_next, cues, welfare)
            if blk is not None:
                blocks[bname] = blk
        if not bt:
            r.add(f"{path}.blocks", "define at least one block")
        first = r.text(st, "first_block", f"{path}.first_block", bnames[0] if bnames else "")
        if bnames and first not in bnames:
            r.add(f"{path}.first_block", f"no block named {first!r} in this stage (blocks: {', '.join(bnames)})")
        nxt = names[i + 1] if i + 1 < len(names) else None
        prev = names[i - 1] if i > 0 else None
        advance = _move(r, st, "advance", path, nxt, names, ctx)
        back = _move(r, st, "step_back", path, prev, names, ctx)
        new_session = r.text(st, "new_session", f"{path}.new_session", "continue",
                             choices=("continue", "first_block")) or "continue"
        if nxt is not None and advance is None and "advance" not in st:
            r.add(path, f"stage has no exit: add [{path}.advance] with a 'when' criterion "
                        "(only the last stage may run without one)")
        out[sname] = Stage(sname, blocks, first or "", advance, back, new_session)
    return out


def _move(r: _Reader, st: dict, key: str, path: str, default_to: str | None, names: list[str], ctx) -> Move | None:
    t = r.table(st, key, f"{path}.{key}")
    if t is None:
        return None
    mpath = f"{path}.{key}"
    r.keys(t, ["when", "to"], mpath)
    when = r.expr(t, "when", f"{mpath}.when", ctx, required=True)
    to = r.text(t, "to", f"{mpath}.to", default_to)
    if to is None:
        where = "next" if key == "advance" else "previous"
        r.add(f"{mpath}.to", f"there is no {where} stage; name the stage to go to")
        return None
    if to not in names:
        r.add(f"{mpath}.to", f"no stage named {to!r} (stages: {', '.join(names)})")
        return None
    if when is None:
        return None
    return Move(when, to)


def _block(r: _Reader, b: dict, path: str, name: str, bnames: list[str], default_next: str,
           cues: dict[str, CueSpec], welfare) -> Block | None:
    r.keys(b, BLOCK_KEYS, path)
    ct = r.table(b, "contingency", f"{path}.contingency", required=True) or {}
    contingency: dict[str, Contingency] = {}
    for cue, v in ct.items():
        cpath = f"{path}.contingency.{cue}"
        if cue not in cues:
            r.add(cpath, f"unknown cue '{cue}' (declared cues: {', '.join(cues) or 'none'})")
            continue
        if not isinstance(v, dict):
            r.add(cpath, f"must be a table {{ p = ..., ul = ... }} (got {_show(v)})")
            continue
        r.keys(v, ["p", "ul"], cpath)
        p = r.num(v, "p", f"{cpath}.p", 0.0, lo=0, hi=1, required=True)
        ul = r.num(v, "ul", f"{cpath}.ul", 0.0, lo=0, hi=1000, required=True)
        if p > 0 and ul == 0:
            r.add(f"{cpath}.ul", f"is 0 while p = {X.fmt(p)}; a rewarded cue needs a volume (or set p = 0)")
        if ul > welfare.max_reward_ul:
            r.add(f"{cpath}.ul", f"{X.fmt(ul)} µL is above the welfare limit max_reward_ul = "
                                 f"{X.fmt(welfare.max_reward_ul)} µL")
        contingency[cue] = Contingency(p, ul)
    if not ct:
        r.add(f"{path}.contingency", "list at least one cue with its p and ul")
    bcues = tuple(contingency)
    next_cue = _next_cue(r, b, path, bcues, cues)
    has_sprt, has_stair = "sprt" in b, "staircase" in b
    unavailable = {}
    if not has_sprt:
        for n in ("sprt_accept", "sprt_reject", "sprt_llr"):
            unavailable[n] = f"needs an SPRT: add [{path}.sprt] with p0 and p1"
    if not has_stair:
        for n in ("difficulty", "reversals"):
            unavailable[n] = f"needs a staircase: add [{path}.staircase]"
    ctx = X.Context(tuple(cues), unavailable=unavailable, choice_cues=_choice_cues(cues))
    reward = _reward(r, b, path, cues)
    staircase = _staircase(r, b, path)
    sprt = _sprt(r, b, path, bcues)
    end = None
    et = r.table(b, "end", f"{path}.end")
    if et is not None:
        epath = f"{path}.end"
        r.keys(et, ["when", "min_trials", "max_trials", "then"], epath)
        when = r.expr(et, "when", f"{epath}.when", ctx)
        mn = r.num(et, "min_trials", f"{epath}.min_trials", 0, lo=0, hi=100000, integer=True)
        mx = r.num(et, "max_trials", f"{epath}.max_trials", None, lo=1, hi=100000, integer=True)
        then = r.text(et, "then", f"{epath}.then", default_next)
        if then not in bnames:
            r.add(f"{epath}.then", f"no block named {then!r} in this stage (blocks: {', '.join(bnames)})")
        if mx is not None and mn > mx:
            r.add(f"{epath}.min_trials", f"{mn} is more than max_trials {mx}")
        if "when" not in et and mx is None:
            r.add(epath, "says neither 'when' nor 'max_trials'; the block could never end")
        end = BlockEnd(when, mn, mx, then or default_next)
    return Block(name, contingency, next_cue, reward, end, staircase, sprt)


NEXT_CUE_KEYS = {
    "sequence": ["policy", "sequence"],
    "balanced": ["policy", "repeats", "max_run"],
    "weighted": ["policy", "weights"],
    "uncertain": ["policy"],
    "anti_bias": ["policy", "window", "max_p"],
}


def _next_cue(r: _Reader, b: dict, path: str, bcues: tuple[str, ...], cues: dict[str, CueSpec]) -> NextCue:
    npath = f"{path}.next_cue"
    t = r.table(b, "next_cue", npath)
    if t is None:
        t = {"policy": "balanced"} if len(bcues) > 1 else {"policy": "sequence", "sequence": list(bcues)}
    kind = r.text(t, "policy", f"{npath}.policy", choices=tuple(NEXT_CUE_KEYS), required=True) or "balanced"
    r.keys(t, NEXT_CUE_KEYS[kind], npath)
    if kind == "sequence":
        seq = t.get("sequence", list(bcues))
        if not isinstance(seq, list) or not seq or not all(isinstance(c, str) for c in seq):
            r.add(f"{npath}.sequence", f"must be a non-empty list of cue ids (got {_show(seq)})")
            seq = list(bcues)
        for c in seq:
            if c not in bcues:
                r.add(f"{npath}.sequence", f"'{c}' is not a cue of this block (cues: {', '.join(bcues)})")
        return NextCue("sequence", sequence=tuple(seq))
    if kind == "balanced":
        if len(bcues) < 2:
            r.add(f"{npath}.policy", "'balanced' needs at least two cues in the block; use 'sequence'")
        repeats = r.num(t, "repeats", f"{npath}.repeats", 1, lo=1, hi=50, integer=True)
        max_run = r.num(t, "max_run", f"{npath}.max_run", 3, lo=1, hi=50, integer=True)
        return NextCue("balanced", repeats=repeats, max_run=max_run)
    if kind == "weighted":
        w = t.get("weights")
        pairs: list[tuple[str, float]] = []
        if not isinstance(w, dict):
            r.add(f"{npath}.weights", f"must be a table of cue = weight (got {_show(w)})")
        else:
            for c in bcues:
                if c not in w:
                    r.add(f"{npath}.weights", f"gives no weight for cue '{c}' of this block")
            for c, x in w.items():
                if c not in bcues:
                    r.add(f"{npath}.weights.{c}", f"'{c}' is not a cue of this block (cues: {', '.join(bcues)})")
                    continue
                v = r.num(w, c, f"{npath}.weights.{c}", None, lo=0, hi=1e6)
                if v is not None:
                    pairs.append((c, v))
            if pairs and sum(v for _, v in pairs) <= 0:
                r.add(f"{npath}.weights", "must have a positive total")
        return NextCue("weighted", weights=tuple(pairs))
    if kind == "anti_bias":
        sides = {cues[c].role for c in bcues if c in cues}
        if not {"left", "right"} <= sides:
            r.add(f"{npath}.policy", "'anti_bias' needs cues with role = \"left\" and role = \"right\" in the block")
        window = r.num(t, "window", f"{npath}.window", 10, lo=1, hi=500, integer=True)
        max_p = r.num(t, "max_p", f"{npath}.max_p", 0.8, lo=0.5, hi=1.0)
        return NextCue("anti_bias", window=window, max_p=max_p)
    return NextCue(kind)


def _reward(r: _Reader, b: dict, path: str, cues) -> RewardPolicy:
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
    ctx = X.Context(tuple(cues), cue_var=True, choice_cues=_choice_cues(cues))
    certainty = r.expr(t, "certainty", f"{rpath}.certainty", ctx, X.NUM)
    if "certainty" not in t:
        certainty = X.parse("p_value_above(cue, 0.5)", ctx, X.NUM)
    return RewardPolicy("thinning", floor if floor is not None else 0.0, certainty)


def _staircase(r: _Reader, b: dict, path: str) -> Staircase | None:
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


def _sprt(r: _Reader, b: dict, path: str, bcues: tuple[str, ...]) -> Sprt | None:
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
        r.add(f"{spath}.cond", f"must be all or a cue of this block (cues: {', '.join(bcues)}; got {cond!r})")
    return Sprt(p0, p1, test or "cusum", alpha, beta, horizon, cond or "all")


def _session_end(r: _Reader, data: dict, cues) -> list[SessionEnd]:
    t = r.table(data, "session_end", "session_end") or {}
    ctx = X.Context(tuple(cues), choice_cues=_choice_cues(cues))
    out = []
    for name, v in t.items():
        path = f"session_end.{name}"
        e = r.expr({name: v}, name, path, ctx)
        if e is not None:
            out.append(SessionEnd(name, e))
    return out


def _check_graph(r: _Reader, stages: dict[str, Stage], first_stage: str) -> None:
    """Every block reachable from its stage's first block; every stage from the first stage."""
    for sname, st in stages.items():
        if st.first_block not in st.blocks:
            continue
        seen, todo = set(), [st.first_block]
        while todo:
            b = todo.pop()
            if b in seen or b not in st.blocks:
                continue
            seen.add(b)
            end = st.blocks[b].end
            if end is not None:
                todo.append(end.then)
        for bname in st.blocks:
            if bname not in seen:
                r.add(f"stages.{sname}.blocks.{bname}", f"unreachable block: it is not the stage's first block "
                                                        f"('{st.first_block}') and no block's end leads to it")
    if first_stage not in stages:
        return
    seen, todo = set(), [first_stage]
    while todo:
        s = todo.pop()
        if s in seen or s not in stages:
            continue
        seen.add(s)
        for mv in (stages[s].advance, stages[s].step_back):
            if mv is not None:
                todo.append(mv.to)
    for sname in stages:
        if sname not in seen:
            r.add(f"stages.{sname}", f"unreachable stage: no advance or step_back leads to it from '{first_stage}'")


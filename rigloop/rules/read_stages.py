"""Read a rule file's schedule: [stages.S] with their moves and [stages.S.blocks.B] with their
contingency, policies and end; then check that every stage and block can be reached.

Stages run in file order unless a move names another; a block's end leads to the next
block of its stage unless it names one (``then``). The block's policies are read in
``read_policies``.
"""

from __future__ import annotations

from collections.abc import Mapping

from . import expr as X
from .model import Block, BlockEnd, Contingency, CueSpec, Move, Stage
from .read_cues import cue_context
from .read_policies import read_next_cue, read_reward, read_sprt, read_staircase
from .reader import Reader, show

MAX_STAGES = 32
MAX_BLOCKS = 32

BLOCK_KEYS = ["contingency", "next_cue", "reward", "staircase", "sprt", "end"]
STAGE_KEYS = ["first_block", "advance", "step_back", "new_session", "blocks"]


def read_stages(r: Reader, data: dict, cues: dict[str, CueSpec], welfare) -> dict[str, Stage]:
    """Every stage of the file, in file order (a stage that is not a table is left out)."""
    t = r.table(data, "stages", "stages", required=True) or {}
    if not t:
        r.add("stages", "define at least one stage")
    if len(t) > MAX_STAGES:
        r.add("stages", f"at most {MAX_STAGES} stages (got {len(t)})")
    names = list(t)
    out: dict[str, Stage] = {}
    ctx = cue_context(cues)
    _undeclared_cues(r, t, cues)
    for i, (sname, st) in enumerate(t.items()):
        path = f"stages.{sname}"
        if not isinstance(st, dict):
            r.add(path, "must be a table")
            continue
        out[sname] = _stage(r, st, sname, path, names, i, cues, welfare, ctx)
    return out


def _undeclared_cues(r: Reader, stages: dict, cues: dict[str, CueSpec]) -> None:
    """Note, before anything reads them, the cues a contingency names that [cues] does not
    declare: the first mention of each is its root problem, every later one follows from it."""
    for sname, st in stages.items():
        bt = st.get("blocks") if isinstance(st, dict) else None
        for bname, b in (bt.items() if isinstance(bt, dict) else ()):
            ct = b.get("contingency") if isinstance(b, dict) else None
            for cue in (ct if isinstance(ct, dict) else ()):
                if cue not in cues:
                    r.drop(f"cue:{cue}", f"stages.{sname}.blocks.{bname}.contingency.{cue}")


def _stage(r: Reader, st: dict, sname: str, path: str, names: list[str], i: int, cues: dict[str, CueSpec],
           welfare, ctx: X.Context) -> Stage:
    """One stage: its blocks, first block, moves (advance to the next stage, step back to the
    previous one by default) and what a new session does."""
    r.keys(st, STAGE_KEYS, path)
    bnames, blocks = _blocks(r, st, path, cues, welfare)
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
    return Stage(sname, blocks, first or "", advance, back, new_session)


def _blocks(r: Reader, st: dict, path: str, cues: dict[str, CueSpec], welfare) -> tuple[list[str], dict[str, Block]]:
    """A stage's block names (as written) and the blocks that are tables; a block ends into
    the next one by default, the last into the first."""
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
    return bnames, blocks


def _move(r: Reader, st: dict, key: str, path: str, default_to: str | None, names: list[str], ctx) -> Move | None:
    mpath = f"{path}.{key}"
    t = r.table(st, key, mpath)
    if t is None:
        if key in st:
            r.drop("move", mpath)
        return None
    r.keys(t, ["when", "to"], mpath)
    when = r.expr(t, "when", f"{mpath}.when", ctx, required=True)
    to = r.text(t, "to", f"{mpath}.to", default_to)
    if to is None:
        where = "next" if key == "advance" else "previous"
        r.add(f"{mpath}.to", f"there is no {where} stage; name the stage to go to")
        r.drop("move", f"{mpath}.to")
        return None
    if to not in names:
        r.add(f"{mpath}.to", f"no stage named {to!r} (stages: {', '.join(names)})")
        r.drop("move", f"{mpath}.to")
        return None
    if when is None:
        r.drop("move", r.cause(f"expr:{mpath}.when") or f"{mpath}.when")
        return None
    return Move(when, to)


def _block(r: Reader, b: dict, path: str, name: str, bnames: list[str], default_next: str,
           cues: dict[str, CueSpec], welfare) -> Block | None:
    r.keys(b, BLOCK_KEYS, path)
    contingency = _contingency(r, b, path, cues, welfare)
    bcues = tuple(contingency)
    ct = b.get("contingency")
    lost = next((r.cause(f"cue:{c}") for c in (ct if isinstance(ct, dict) else ()) if c not in cues), None)
    if lost is not None:
        r.drop(f"cues_of:{path}", lost)  # the block's policies see fewer cues than the file gives it
    next_cue = read_next_cue(r, b, path, bcues, cues)
    ctx = cue_context(cues, unavailable=_unavailable(b, path))
    reward = read_reward(r, b, path, cues)
    staircase = read_staircase(r, b, path)
    sprt = read_sprt(r, b, path, bcues)
    end = _block_end(r, b, path, ctx, bnames, default_next)
    return Block(name, contingency, next_cue, reward, end, staircase, sprt)


def _contingency(r: Reader, b: dict, path: str, cues: dict[str, CueSpec], welfare) -> dict[str, Contingency]:
    """The block's cues with their reward probability and volume (within the welfare limit)."""
    ct = r.table(b, "contingency", f"{path}.contingency", required=True) or {}
    contingency: dict[str, Contingency] = {}
    for cue, v in ct.items():
        cpath = f"{path}.contingency.{cue}"
        if cue not in cues:
            root = r.cause(f"cue:{cue}")
            r.add(cpath, f"unknown cue '{cue}' (declared cues: {', '.join(cues) or 'none'})",
                  follows=None if root == cpath else root)
            continue
        if not isinstance(v, dict):
            r.add(cpath, f"must be a table {{ p = ..., ul = ... }} (got {show(v)})")
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
    return contingency


def _unavailable(b: dict, path: str) -> dict[str, str]:
    """The names a block's end may not read, with why: the SPRT's without an sprt table, the
    staircase's without a staircase."""
    unavailable = {}
    if "sprt" not in b:
        for n in ("sprt_accept", "sprt_reject", "sprt_llr"):
            unavailable[n] = f"needs an SPRT: add [{path}.sprt] with p0 and p1"
    if "staircase" not in b:
        for n in ("difficulty", "reversals"):
            unavailable[n] = f"needs a staircase: add [{path}.staircase]"
    return unavailable


def _block_end(r: Reader, b: dict, path: str, ctx: X.Context, bnames: list[str],
               default_next: str) -> BlockEnd | None:
    """When the block ends (a criterion, trial bounds) and the block that follows; None without
    an end table."""
    et = r.table(b, "end", f"{path}.end")
    if et is None:
        return None
    epath = f"{path}.end"
    r.keys(et, ["when", "min_trials", "max_trials", "then"], epath)
    when = r.expr(et, "when", f"{epath}.when", ctx)
    mn = r.num(et, "min_trials", f"{epath}.min_trials", 0, lo=0, hi=100000, integer=True)
    mx = r.num(et, "max_trials", f"{epath}.max_trials", None, lo=1, hi=100000, integer=True)
    then = r.text(et, "then", f"{epath}.then", default_next)
    if then not in bnames:
        r.add(f"{epath}.then", f"no block named {then!r} in this stage (blocks: {', '.join(bnames)})")
        r.drop(f"then:{path.rsplit('.blocks.', 1)[0]}", f"{epath}.then")
    if mx is not None and mn > mx:
        r.add(f"{epath}.min_trials", f"{mn} is more than max_trials {mx}")
    if "when" not in et and mx is None:
        r.add(epath, "says neither 'when' nor 'max_trials'; the block could never end")
    return BlockEnd(when, mn, mx, then or default_next)


# --------------------------------------------------------------------------- the graph check


def check_graph(r: Reader, stages: dict[str, Stage], first_stage: str) -> None:
    """Every block reachable from its stage's first block; every stage from the first stage."""
    for sname, st in stages.items():
        if st.first_block not in st.blocks:
            continue
        seen = _reachable(st.first_block, {b: _block_exits(blk) for b, blk in st.blocks.items()})
        for bname in st.blocks:
            if bname not in seen:
                r.add(f"stages.{sname}.blocks.{bname}", f"unreachable block: it is not the stage's first block "
                                                        f"('{st.first_block}') and no block's end leads to it",
                      follows=r.cause(f"then:stages.{sname}"))
    if first_stage not in stages:
        return
    seen = _reachable(first_stage, {s: _stage_exits(stage) for s, stage in stages.items()})
    for sname in stages:
        if sname not in seen:
            r.add(f"stages.{sname}", f"unreachable stage: no advance or step_back leads to it from '{first_stage}'",
                  follows=r.cause("move"))


def _reachable(start: str, exits: Mapping[str, list[str]]) -> set[str]:
    """The names reached from ``start`` along ``exits`` (a name with no entry ends its path)."""
    seen, todo = set(), [start]
    while todo:
        n = todo.pop()
        if n in seen or n not in exits:
            continue
        seen.add(n)
        todo.extend(exits[n])
    return seen


def _block_exits(block: Block) -> list[str]:
    return [] if block.end is None else [block.end.then]


def _stage_exits(stage: Stage) -> list[str]:
    return [mv.to for mv in (stage.advance, stage.step_back) if mv is not None]

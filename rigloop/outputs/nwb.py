"""NWB export: one file per subject, holding every stored session of it.

The file (Neurodata Without Borders, written with pynwb) carries the subject, one epoch
per session, a trials table and the model's time-binned prediction errors:

* ``session_start_time`` is the first session's ``opened_at`` (UTC); every time in the
  file is in seconds from it, so trials line up with recordings that share the clock.
* trials: ``start_time`` = the trial's ``wall_time``, ``stop_time`` = start + ``duration``;
  the trial's own fields (cue, response, reward µL), the decision the trial ran under
  (block, stage, reward_prob, its reasons joined one per line), and every per-trial
  quantity the store holds as a float column (NaN where a trial has none).
* ``processing/model/td_errors``: the learner's per-step prediction errors. The store
  keeps only the per-trial quantities, so they are recomputed by replaying the subject's
  sessions through ``step`` with each session's own rule file (replay reproduces the
  stored quantities exactly; a session that does not is refused). Error ``t`` of a timed
  representation is at trial start + ``(t + 1) * dt`` (the error on entering step t + 1);
  the one error of a trial-level learner is at the outcome (reward time, else the last
  cue's offset, else the trial's end). The trial columns ``td_error_index`` and
  ``td_error_count`` say which samples belong to a trial.

The only module that imports pynwb (the ``nwb`` extra); it is imported inside the writer.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from datetime import UTC, datetime
from typing import Any

from ..core.learner_setup import representation_for
from ..core.step import step
from ..core.subject import new_subject
from ..core.trial import Decision
from ..errors import StoreError
from ..replay import RulesCache, open_stored_session, session_rules, stored_sessions
from ..version import __version__

_NAN = float("nan")


@dataclass
class SubjectTable:
    """A subject's stored trials, flattened for the file (one list per column)."""

    subject: str
    sessions: list = field(default_factory=list)  # SessionInfo, in order
    columns: dict[str, list] = field(default_factory=dict)  # trial columns, text or float or int
    quantity_names: list[str] = field(default_factory=list)
    td_times: list[float] = field(default_factory=list)  # s from the file's start
    td_errors: list[float] = field(default_factory=list)
    units: set[str] = field(default_factory=set)  # the reward scales of the rule files


@dataclass(frozen=True)
class NwbExport:
    """What :func:`write_nwb` wrote."""

    path: str
    sessions: int
    trials: int
    td_errors: int


_TEXT = ("session", "rig", "cue", "cues", "response_kind", "response_text", "response_result",
         "block", "stage", "reasons", "overrides", "warnings")
_FLOAT = ("response_value", "response_latency", "reward_ul", "reward_prob",
          "cue_onset", "cue_offset")
_INT = ("trial", "td_error_index", "td_error_count")

_DESCRIPTIONS = {
    "session": "the session the trial belongs to",
    "trial": "trial number within its session (from 1)",
    "rig": "the rig that ran the trial",
    "cue": "the trial's first cue ('' for a trial without cues)",
    "cues": "every cue of the trial, comma-separated",
    "cue_onset": "the first cue's onset, s from the trial's start (NaN without cues)",
    "cue_offset": "the first cue's offset, s from the trial's start (NaN without cues)",
    "response_kind": "the kind of response the rig reported (e.g. licks, choice)",
    "response_value": "the response's number (lick count, presses); NaN for a side or none",
    "response_text": "the response's word (a side); '' when it is a number or missing",
    "response_result": "the scored result (correct, incorrect, ...; '' when not scored)",
    "response_latency": "response latency, s (NaN when none)",
    "reward_ul": "water delivered on the trial, µL",
    "reward_prob": "the reward probability the decision set for this trial",
    "block": "the block the trial ran in (the decision it ran under)",
    "stage": "the stage the trial ran in (the decision it ran under)",
    "reasons": "the reasons of the decision the trial ran under, one per line",
    "overrides": "the welfare overrides of that decision, one per line",
    "warnings": "the warnings of that decision, one per line",
    "td_error_index": "index of the trial's first sample in processing/model/td_errors",
    "td_error_count": "number of samples of the trial in processing/model/td_errors",
}


def subject_table(store, subject: str) -> SubjectTable:
    """Read and replay ``subject``'s stored sessions into one :class:`SubjectTable`."""
    infos = stored_sessions(store, subject)
    table = SubjectTable(subject, list(infos))
    zero = infos[0].opened_at
    rows: list[dict[str, Any]] = []
    quantities: list[dict[str, Any]] = []
    cache = RulesCache()
    state = None
    for info in infos:
        rules = session_rules(info, cache)
        table.units.add(rules.reward_unit_ul)
        if state is None:
            state = new_subject(subject, rules)
        state, under = open_stored_session(state, info, rules)
        stored_q = {r.pop("trial"): r for r in store.rows("quantities", subject, info.session)}
        after = {d.trial - 1: d for d in store.decisions(subject, info.session)}
        rep = representation_for(rules)
        for event in store.trials(subject, info.session):
            state, decision, update = step(state, event, rules)
            q = stored_q.get(event.trial, {})
            q.pop("subject", None)
            q.pop("session", None)
            if q != dict(update.quantities):
                raise StoreError(f"session {info.session!r} of subject {subject!r} does not "
                                 f"replay: trial {event.trial}'s stored quantities differ")
            start = event.wall_time - zero
            row = _trial_row(info.session, event, under, start)
            row["td_error_index"], row["td_error_count"] = len(table.td_errors), len(update.errors)
            table.td_times.extend(_error_times(event, rep, start, len(update.errors)))
            table.td_errors.extend(float(e) for e in update.errors)
            rows.append(row)
            quantities.append(q)
            under = after.get(event.trial, decision)
    names = sorted({k for q in quantities for k in q})
    table.quantity_names = names
    for name in (*_TEXT, *_FLOAT, *_INT):
        table.columns[name] = [r[name] for r in rows]
    table.columns["start_time"] = [r["start_time"] for r in rows]
    table.columns["stop_time"] = [r["stop_time"] for r in rows]
    for name in names:
        table.columns[name] = [_NAN if q.get(name) is None else float(q[name]) for q in quantities]
    return table


def _trial_row(session: str, event, under: Decision, start: float) -> dict[str, Any]:
    """One trial's own fields and those of the decision it ran under."""
    r, o, cues = event.response, event.outcome, event.cues
    number = isinstance(r.value, (int, float))
    return {
        "session": session, "trial": event.trial, "rig": event.rig,
        "start_time": start, "stop_time": start + event.duration,
        "cue": cues[0].cue if cues else "", "cues": ",".join(c.cue for c in cues),
        "cue_onset": cues[0].onset if cues else _NAN,
        "cue_offset": cues[0].offset if cues else _NAN,
        "response_kind": r.kind, "response_value": float(r.value) if number else _NAN,
        "response_text": r.value if isinstance(r.value, str) else "",
        "response_result": r.result or "",
        "response_latency": _NAN if r.latency is None else r.latency, "reward_ul": o.reward_ul,
        "reward_prob": under.reward_prob, "block": under.block or "", "stage": under.stage or "",
        "reasons": "\n".join(under.reasons), "overrides": "\n".join(under.overrides),
        "warnings": "\n".join(under.warnings),
        "td_error_index": 0, "td_error_count": 0,
    }


def _error_times(event, rep, start: float, n: int) -> list[float]:
    """When each of a trial's ``n`` errors happened, s from the file's start (module docstring)."""
    if rep.timed:
        return [start + (t + 1) * rep.dt for t in range(n)]
    o = event.outcome
    if o.rewarded and o.reward_time is not None:
        at = o.reward_time
    elif event.cues:
        at = max(c.offset for c in event.cues)
    else:
        at = event.duration
    return [start + at] * n


def write_nwb(store, subject: str, path: str, *, species: str | None = None, sex: str = "U",
              age: str | None = None, lab: str | None = None,
              institution: str | None = None) -> NwbExport:
    """Write ``subject``'s stored sessions to the NWB file ``path`` (one file per subject).

    ``species`` (a Latin binomial, e.g. "Mus musculus"), ``sex`` (M, F, U, O) and ``age``
    (ISO 8601 duration, e.g. "P90D") are not in the store; give them when known.
    """
    from pynwb import NWBHDF5IO, NWBFile, TimeSeries
    from pynwb.file import Subject

    table = subject_table(store, subject)
    infos = table.sessions
    zero = infos[0].opened_at
    nwb = NWBFile(
        session_description=f"rigloop trials of subject {subject}: {len(infos)} session(s), "
                            f"{len(table.columns['trial'])} trials",
        identifier=_identifier(table),
        session_start_time=datetime.fromtimestamp(zero, tz=UTC),
        session_id=",".join(i.session for i in infos),
        experiment_description="rule files: "
                               + ", ".join(dict.fromkeys(i.rules_name for i in infos)),
        protocol=",".join(dict.fromkeys(i.rules_sha256 for i in infos)),
        notes="\n".join(_session_note(i) for i in infos),
        source_script=f"rigloop {__version__}",
        source_script_file_name="rigloop",
        lab=lab,
        institution=institution,
        subject=Subject(subject_id=subject, species=species, sex=sex, age=age,
                        description="a subject of a rigloop store"),
    )
    _add_epochs(nwb, table, zero)
    _add_trials(nwb, table)
    unit = next(iter(table.units)) if len(table.units) == 1 else None
    module = nwb.create_processing_module("model", "the learner's prediction errors (by replay)")
    module.add(TimeSeries(
        name="td_errors",
        data=table.td_errors,
        timestamps=table.td_times,
        unit="reward units" if unit is None else f"reward units ({unit:g} µL = 1)",
        description="the learner's per-step prediction errors (delta_t = r_t+1 + gamma V(x_t+1) "
                    "- V(x_t) for TD learners, r - V for trial-level learners), at the time each "
                    "was made; trials' td_error_index and td_error_count select a trial's samples",
    ))
    with NWBHDF5IO(str(path), "w") as io:
        io.write(nwb)
    return NwbExport(str(path), len(infos), len(table.columns["trial"]), len(table.td_errors))


def _identifier(table: SubjectTable) -> str:
    """A stable identifier for the file's content: subject, sessions and trial count."""
    parts = [f"{i.session}:{i.rules_sha256}:{i.opened_at!r}" for i in table.sessions]
    key = "\n".join([table.subject, *parts, str(len(table.columns["trial"]))])
    return f"rigloop-{table.subject}-{hashlib.sha256(key.encode()).hexdigest()[:16]}"


def _session_note(info) -> str:
    """One line per session: its name, rig, rule file and opening time."""
    opened = datetime.fromtimestamp(info.opened_at, tz=UTC).isoformat()
    return (f"session {info.session}: rig {info.rig}, rule file {info.rules_name} "
            f"({info.rules_sha256[:12]}), opened {opened}")


def _add_epochs(nwb, table: SubjectTable, zero: float) -> None:
    """One epoch per session: from its opening to its closing (or its last trial's end)."""
    sessions, stops = table.columns["session"], table.columns["stop_time"]
    for info in table.sessions:
        start = info.opened_at - zero
        ends = [s for name, s in zip(sessions, stops, strict=True) if name == info.session]
        stop = info.closed_at - zero if info.closed_at is not None else max(ends, default=start)
        nwb.add_epoch(start_time=start, stop_time=max(stop, start), tags=[info.session])


def _add_trials(nwb, table: SubjectTable) -> None:
    """The trials table: its fixed columns, then one float column per quantity."""
    cols = table.columns
    if not cols["trial"]:
        return
    for name in (*_TEXT, *_FLOAT, *_INT):
        nwb.add_trial_column(name=name, description=_DESCRIPTIONS.get(name, name))
    for name in table.quantity_names:
        nwb.add_trial_column(name=column_name(name),
                             description=f"the per-trial quantity {name} (NaN where none)")
    names = [n for n in cols if n not in ("start_time", "stop_time")]
    for i in range(len(cols["trial"])):
        nwb.add_trial(start_time=cols["start_time"][i], stop_time=cols["stop_time"][i],
                      **{column_name(n): cols[n][i] for n in names})


def column_name(quantity: str) -> str:
    """A quantity's trial column: its stored name with ':' (NWB's separator) written '.',
    so ``q[cue:left]`` is the column ``q[cue.left]``."""
    return quantity.replace(":", ".")


__all__ = ["NwbExport", "SubjectTable", "column_name", "subject_table", "write_nwb"]

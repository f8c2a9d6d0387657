"""Figures of a subject's learning for a lab meeting: cue values, the animal's own
responses beside what the learner predicts, per-cue hit and false-alarm rates, the
staircase level, prediction errors and the water earned per lab day against the rule
file's daily minimum, with sessions, blocks and stages marked.

The only module that imports matplotlib (the ``report`` extra; ``cohort_report`` draws
through ``pyplot()`` here). It reads plain rows (as ``Store.rows`` yields them, or as
exported), so it works on live data and on replayed or simulated sessions alike. A PNG
or, by the file's extension, a vector PDF or SVG.
"""

from __future__ import annotations

import re
from collections.abc import Iterable, Mapping, Sequence
from typing import Any

_VALUE = re.compile(r"^value\[(.+)\]$")
_BEHAVIOUR = re.compile(r"^(p_respond|p_right)\[(.+)\]$")  # the animal's own estimate per cue
# Okabe & Ito (2008), "Color Universal Design": eight colours told apart with every common
# colour-vision deficiency. Yellow (#F0E442) comes late: it is faint as a line on white.
OKABE_ITO = ("#E69F00", "#56B4E9", "#009E73", "#0072B2", "#D55E00", "#CC79A7", "#F0E442", "#000000")
SUFFIXES = (".png", ".pdf", ".svg")
_SHADES = ("#f2f2f2", "#dfe7ee", "#efe6d9", "#e3eee3", "#ece3ec")  # block shading, pale and told apart by the key


def pyplot():
    """matplotlib's pyplot on the file-only Agg backend (no window, no display needed)."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def check_out(path: str) -> str:
    """``path`` if its extension names a format this module writes, else BadArgument."""
    from ..errors import BadArgument

    if not str(path).lower().endswith(SUFFIXES):
        raise BadArgument("--out", f"a file ending in {', '.join(SUFFIXES)} (PNG, or vector PDF/SVG)", path)
    return path


def cue_colours(cues: Iterable[str]) -> dict[str, str]:
    """One Okabe–Ito colour per cue, in sorted order, so every panel and figure agrees."""
    return {c: OKABE_ITO[i % len(OKABE_ITO)] for i, c in enumerate(sorted(set(cues)))}


def _series(rows: Sequence[Mapping[str, Any]], name: str) -> list[float]:
    return [float("nan") if r.get(name) is None else float(r[name]) for r in rows]


def runs(labels: Sequence[Any]) -> list[tuple[int, int, Any]]:
    """``(first, last, label)`` of each run of equal consecutive labels (indices inclusive)."""
    out: list[tuple[int, int, Any]] = []
    for i, label in enumerate(labels):
        if out and out[-1][2] == label:
            out[-1] = (out[-1][0], i, label)
        else:
            out.append((i, i, label))
    return out


def schedule(decisions: Sequence[Mapping[str, Any]], sessions: Sequence[Any] = ()) -> list[Mapping[str, Any]]:
    """The decision each trial ran under: the one after the trial before it in its session;
    a session's first trial takes the session's first decision (``meta``) when known, else
    its own."""
    first = {s.session: s.meta.get("first_decision") for s in sessions if getattr(s, "meta", None)}
    out: list[Mapping[str, Any]] = []
    for i, d in enumerate(decisions):
        if i and decisions[i - 1].get("session") == d.get("session"):
            out.append(decisions[i - 1])
        else:
            out.append(first.get(d.get("session")) or d)
    return out


def rewarded_cues(ran_under: Sequence[Mapping[str, Any]]) -> dict[Any, set[str]]:
    """Per block name, the cues it rewarded (presented with a reward probability above 0)."""
    out: dict[Any, set[str]] = {}
    for d in ran_under:
        cues = out.setdefault(d.get("block"), set())
        if d.get("cue") is not None and float(d.get("reward_prob") or 0.0) > 0.0:
            cues.add(d["cue"])
    return out


def hit_false_alarm(quantities: Sequence[Mapping[str, Any]], ran_under: Sequence[Mapping[str, Any]],
                    cue: str) -> dict[str, list[tuple[float, float, float]]]:
    """The animal's P(respond | cue) with its 95% band split by whether the trial's block
    rewards the cue: ``{"hit": [...], "false_alarm": [...]}``, each (estimate, lo, hi) per
    trial, NaN where the trial belongs to the other kind."""
    nan = float("nan")
    rewarded = rewarded_cues(ran_under)
    out: dict[str, list[tuple[float, float, float]]] = {"hit": [], "false_alarm": []}
    for q, d in zip(quantities, ran_under):
        est = q.get(f"p_respond[{cue}]")
        point = (nan, nan, nan) if est is None else (
            float(est), float(q.get(f"p_respond_lo95[{cue}]", nan)), float(q.get(f"p_respond_hi95[{cue}]", nan)))
        kind = "hit" if cue in rewarded.get(d.get("block"), ()) else "false_alarm"
        out[kind].append(point)
        out["false_alarm" if kind == "hit" else "hit"].append((nan, nan, nan))
    return out


def daily_water(trials: Iterable[Mapping[str, Any]], sessions: Sequence[Any]) -> list[tuple[str, float, float]]:
    """``(lab day, µL earned on the rig, daily minimum µL)`` per lab day, in order. The day
    and the minimum come from the ``[welfare]`` table of each trial's session rule file
    (``day_starts``, ``timezone``, ``daily_min_ml``); the highest minimum of a day counts."""
    from ..rules.load import load_rules
    from ..rules.welfare import lab_day

    limits = {s.session: load_rules(s.rules_text, s.rules_name).welfare for s in sessions}
    days: dict[str, list[float]] = {}
    for t in trials:
        w = limits.get(t.get("session"))
        if w is None or t.get("wall_time") is None:
            continue
        day = days.setdefault(lab_day(float(t["wall_time"]), w), [0.0, 0.0])
        day[0] += float(t.get("reward_ul") or 0.0)
        day[1] = max(day[1], w.daily_min_ml * 1000.0)
    return [(k, v[0], v[1]) for k, v in sorted(days.items())]


def title_for(subject: str, sessions: Sequence[Any]) -> str:
    """'subject S · rule file(s) R · first day – last day (n sessions)' from the stored sessions."""
    import datetime as dt

    if not sessions:
        return f"subject {subject}"
    names = list(dict.fromkeys(s.rules_name for s in sessions))
    dates = [dt.datetime.fromtimestamp(s.opened_at, tz=dt.timezone.utc).date().isoformat() for s in sessions]
    when = dates[0] if dates[0] == dates[-1] else f"{dates[0]} to {dates[-1]}"
    n = len(sessions)
    return f"subject {subject} · rules {', '.join(names)} · {when} (UTC, {n} session{'s' if n != 1 else ''})"


def mark_sessions(axes: Sequence[Any], session_of: Sequence[Any], *, label_axis: Any = None) -> None:
    """A grey line at every session boundary on each axis; the session names above ``label_axis``."""
    spans = runs(session_of)
    for first, _, _ in spans[1:]:
        for a in axes:
            a.axvline(first + 0.5, color="0.35", lw=1.0)
    if label_axis is not None:
        for first, last, name in spans:
            label_axis.annotate(f"session {name}", ((first + last) / 2 + 1, 1.0), xycoords=("data", "axes fraction"),
                                xytext=(0, 2), textcoords="offset points", ha="center", va="bottom", fontsize=7,
                                color="0.25", annotation_clip=False)


def shade_blocks(axes: Sequence[Any], ran_under: Sequence[Mapping[str, Any]]) -> list[Any]:
    """Pale shading per block (the same shade for the same block name), a bold line at
    each stage change; returns legend handles naming every block and stage."""
    from matplotlib.patches import Patch

    blocks = [str(d.get("block")) for d in ran_under]
    stages = [str(d.get("stage")) for d in ran_under]
    shade = {b: _SHADES[i % len(_SHADES)] for i, b in enumerate(dict.fromkeys(blocks))}
    for first, last, b in runs(blocks):
        for a in axes:
            a.axvspan(first + 0.5, last + 1.5, color=shade[b], lw=0, zorder=0)
    for first, _, _ in runs(stages)[1:]:
        for a in axes:
            a.axvline(first + 0.5, color="0.1", lw=1.4, ls="--", zorder=1)
    handles = [Patch(color=c, label=f"block {b}") for b, c in shade.items()]
    names = list(dict.fromkeys(stages))
    from matplotlib.lines import Line2D

    handles.append(Line2D([], [], color="0.1", lw=1.4, ls="--",
                          label=f"stage change (stages: {', '.join(names)})" if len(names) > 1 else f"stage {names[0]}"))
    handles.append(Line2D([], [], color="0.35", lw=1.0, label="session boundary"))
    return handles


def plot_subject(
    quantities: Iterable[Mapping[str, Any]],
    decisions: Iterable[Mapping[str, Any]],
    path: str,
    *,
    trials: Iterable[Mapping[str, Any]] | None = None,
    sessions: Sequence[Any] = (),
    title: str | None = None,
    chance: float | None = 0.5,
) -> str:
    """Write one subject's figure to ``path`` (PNG, or PDF/SVG by extension); returns ``path``.

    ``quantities``: per-trial rows with ``value[cue]``, ``sd[cue]``, ``delta_cue``,
    ``delta_outcome``, ``p_correct`` and its band, and the animal's own behaviour per cue
    (``p_respond[cue]`` or ``p_right[cue]`` with ``_lo95``/``_hi95``) beside what the learner
    predicts (``p_model[cue]``). ``decisions``: the decision rows that followed each trial
    (``block``, ``stage``, ``cue``, ``reward_prob``, ``difficulty``). ``trials``: the trial rows
    (``session``, ``wall_time``, ``reward_ul``). ``sessions``: the stored ``SessionInfo``s, for
    the title, each session's first decision and the rule file's daily water minimum.
    Panels appear only when their data are there (hit/false alarm for go/no-go cues, the
    staircase level when a decision set one, the water per lab day when trials and sessions
    are given).
    """
    import numpy as np

    plt = pyplot()
    q, d = list(quantities), list(decisions)
    t = list(trials) if trials is not None else []
    ran_under = schedule(d, sessions) if len(d) == len(q) else d
    x = np.arange(1, len(q) + 1)
    cues = sorted({m.group(1) for row in q for k in row for m in [_VALUE.match(k)] if m})
    behaviour = sorted({(m.group(2), m.group(1)) for row in q for k in row for m in [_BEHAVIOUR.match(k)] if m})
    colour = cue_colours(set(cues) | {c for c, _ in behaviour})
    go_nogo = [c for c, name in behaviour if name == "p_respond"]
    level = np.array([np.nan if r.get("difficulty") is None else float(r["difficulty"]) for r in ran_under])
    water = daily_water(t, sessions) if t and sessions else []

    panels = ["values", "behaviour"] + (["hit_fa"] if go_nogo else []) \
        + (["level"] if np.any(~np.isnan(level)) else []) + ["errors"]
    heights = [3] * len(panels) + ([2.4] if water else [])
    fig = plt.figure(figsize=(11, 2.4 * sum(heights) / 3 + 1.2), layout="constrained")
    grid = fig.add_gridspec(len(heights), 1, height_ratios=heights)
    axes = [fig.add_subplot(grid[0])]
    axes += [fig.add_subplot(grid[i], sharex=axes[0]) for i in range(1, len(panels))]
    ax_of = dict(zip(panels, axes))

    ax = ax_of["values"]
    spread = False
    for cue in cues:
        mean, sd = np.array(_series(q, f"value[{cue}]")), np.array(_series(q, f"sd[{cue}]"))
        ok = ~np.isnan(mean)
        ax.plot(x[ok], mean[ok], ".-", ms=3, lw=1, color=colour[cue], label=cue)
        if np.any(np.nan_to_num(sd[ok]) > 0):
            spread = True
            ax.fill_between(x[ok], mean[ok] - sd[ok], mean[ok] + sd[ok], color=colour[cue], alpha=0.25, lw=0)
    # a point learner has no sd (stored as 0): then the label says only what is drawn
    ax.set_ylabel("learner's value at cue\n" + ("(mean ± sd, reward units)" if spread else "(reward units)"))
    ax.legend(loc="upper left", bbox_to_anchor=(1.005, 1.0), fontsize=7, frameon=False, title="cue",
              title_fontsize=7)

    ax = ax_of["behaviour"]
    for cue, name in behaviour:
        est = np.array(_series(q, f"{name}[{cue}]"))
        lo, hi = np.array(_series(q, f"{name}_lo95[{cue}]")), np.array(_series(q, f"{name}_hi95[{cue}]"))
        what = "P(respond)" if name == "p_respond" else "P(right)"
        ax.plot(x, est, lw=1.2, color=colour[cue], label=f"animal: {what} | {cue}")
        ax.fill_between(x, lo, hi, color=colour[cue], alpha=0.2, lw=0)
        model = np.array(_series(q, f"p_model[{cue}]"))
        ok = ~np.isnan(model)
        if ok.any():
            ax.plot(x[ok], model[ok], ".", ms=2.5, color=colour[cue], alpha=0.7, label=f"learner predicts | {cue}")
    p = np.array(_series(q, "p_correct"))
    if not behaviour or not np.all(np.isnan(p)):
        ax.plot(x, p, color="0.3", lw=0.8, ls="--", label="P(correct), all cues")
    if chance is not None:
        ax.axhline(chance, color="0.4", ls=":", lw=1, label="chance")
    ax.set_ylim(0, 1)
    ax.set_ylabel("the animal's responses\n(probability, 95% band)")
    ax.legend(loc="upper left", bbox_to_anchor=(1.005, 1.0), fontsize=7, frameon=False)

    if "hit_fa" in ax_of:
        ax = ax_of["hit_fa"]
        for cue in go_nogo:
            split = hit_false_alarm(q, ran_under, cue)
            for kind, style, word in (("hit", "-", "hit"), ("false_alarm", "--", "false alarm")):
                est, lo, hi = (np.array(v) for v in zip(*split[kind]))
                if np.all(np.isnan(est)):
                    continue
                ax.plot(x, est, ls=style, lw=1.3, color=colour[cue], label=f"{word} rate | {cue}")
                ax.fill_between(x, lo, hi, color=colour[cue], alpha=0.15, lw=0)
        ax.set_ylim(0, 1)
        ax.set_ylabel("P(respond | cue)\n(probability, 95% band)")
        ax.legend(loc="upper left", bbox_to_anchor=(1.005, 1.0), fontsize=7, frameon=False,
                  title="hit: block rewards the cue\nfalse alarm: it does not", title_fontsize=7)

    if "level" in ax_of:
        ax = ax_of["level"]
        ax.step(x, level, where="mid", color="0.15", lw=1.3, label="staircase level")
        ax.set_ylabel("staircase level\n(rule file's units)")
        ax.legend(loc="upper left", bbox_to_anchor=(1.005, 1.0), fontsize=7, frameon=False)

    ax = ax_of["errors"]
    ax.plot(x, _series(q, "delta_cue"), ".", ms=3, color="0.1", label="δ at cue onset")
    ax.plot(x, _series(q, "delta_outcome"), "x", ms=3, color="0.55", label="δ at outcome")
    ax.axhline(0, color="0.5", lw=0.5)
    ax.set_ylabel("prediction error\n(reward units)")
    ax.legend(loc="upper left", bbox_to_anchor=(1.005, 1.0), fontsize=7, frameon=False)
    ax.set_xlabel("trial (all sessions, in order; count)")
    for a in axes[:-1]:
        a.tick_params(labelbottom=False)

    key = shade_blocks(axes, ran_under) if ran_under else []
    session_of = [r.get("session") for r in (t if len(t) == len(q) else d)]
    mark_sessions(axes, session_of, label_axis=axes[0])
    if key:  # below the figure, where no label is cut and no trial hidden
        fig.legend(handles=key, loc="outside lower center", ncol=min(5, len(key)), fontsize=7, frameon=False)

    if water:
        ax = fig.add_subplot(grid[len(panels)])
        draw_water(ax, {None: water}, {None: "0.6"})  # grey: cue colours stay for cues
    fig.suptitle(title or "rigloop report", fontsize=11)
    fig.savefig(path, dpi=120)
    plt.close(fig)
    return path


def draw_water(ax: Any, per_subject: Mapping[Any, Sequence[tuple[str, float, float]]],
               colours: Mapping[Any, str]) -> None:
    """Bars of µL earned per lab day (grouped by subject), the daily minimum as a line per day."""
    import numpy as np

    days = sorted({day for rows in per_subject.values() for day, _, _ in rows})
    where = {day: i for i, day in enumerate(days)}
    width = 0.8 / max(1, len(per_subject))
    need = {}
    for k, (subject, rows) in enumerate(per_subject.items()):
        xs = [where[day] - 0.4 + width * (k + 0.5) for day, _, _ in rows]
        ax.bar(xs, [ul for _, ul, _ in rows], width=width * 0.9, color=colours[subject],
               label="earned on the rig" if subject is None else str(subject))
        for day, _, low in rows:
            need[day] = max(need.get(day, 0.0), low)
    for day, low in need.items():
        i = where[day]
        ax.hlines(low, i - 0.45, i + 0.45, color="0.0", lw=2, ls="--",
                  label="daily minimum (rule file)" if i == min(where[d] for d in need) else None)
    ax.set_xticks(np.arange(len(days)), days, fontsize=8)
    ax.set_xlim(-0.6, len(days) - 0.4)
    ax.set_xlabel("lab day (the rule file's day start and time zone)")
    ax.set_ylabel("water earned\n(µL per lab day)")
    ax.legend(loc="upper left", bbox_to_anchor=(1.005, 1.0), fontsize=7, frameon=False)

"""Plots of a subject's learning: cue values with uncertainty bands, the learning curve,
prediction errors and reward, with block and stage changes marked.

The only module that imports matplotlib (the ``report`` extra). It reads plain rows
(as ``Store.rows`` yields them, or as exported), so it works on live data and on
replayed or simulated sessions alike.
"""

from __future__ import annotations

import re
from collections.abc import Iterable, Mapping, Sequence
from typing import Any

_VALUE = re.compile(r"^value\[(.+)\]$")
_BEHAVIOUR = re.compile(r"^(p_respond|p_right)\[(.+)\]$")  # the animal's own estimate per cue


def _series(rows: Sequence[Mapping[str, Any]], name: str) -> list[float]:
    return [float("nan") if r.get(name) is None else float(r[name]) for r in rows]


def _changes(decisions: Sequence[Mapping[str, Any]], key: str) -> list[tuple[int, str]]:
    """(x position, new label) wherever ``key`` changes between consecutive decisions."""
    out, last = [], None
    for i, d in enumerate(decisions):
        label = d.get(key)
        if label != last:
            out.append((i, str(label)))
            last = label
    return out


def plot_subject(
    quantities: Iterable[Mapping[str, Any]],
    decisions: Iterable[Mapping[str, Any]],
    path: str,
    *,
    trials: Iterable[Mapping[str, Any]] | None = None,
    title: str | None = None,
    chance: float | None = 0.5,
) -> str:
    """Write a four-panel PNG (or PDF/SVG by extension) of one subject's trials to ``path``.

    ``quantities``: per-trial rows with ``value[cue]``, ``sd[cue]``, ``delta_cue``,
    ``delta_outcome``, ``p_correct``, ``p_lo95``, ``p_hi95``, and the animal's own behaviour
    per cue (``p_respond[cue]`` or ``p_right[cue]`` with ``_lo95``/``_hi95``) beside what the
    learner predicts (``p_model[cue]``): the second panel shows where the two disagree. ``decisions``: the decision
    rows that followed each trial (``block``, ``stage``, ``reward_prob``). ``trials``: the
    trial rows (``session``, ``reward_ul``), for the water panel (µL delivered, summed within
    each session); without them that panel shows the reward probability decided. Returns ``path``.
    """
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    import numpy as np

    q = list(quantities)
    d = list(decisions)
    x = np.arange(1, len(q) + 1)
    cues = sorted({m.group(1) for row in q for k in row for m in [_VALUE.match(k)] if m})
    behaviour = sorted({(m.group(2), m.group(1)) for row in q for k in row for m in [_BEHAVIOUR.match(k)] if m})
    named = sorted(set(cues) | {c for c, _ in behaviour})
    colour = {c: f"C{i % 10}" for i, c in enumerate(named)}  # one colour per cue, in every panel

    fig, axes = plt.subplots(4, 1, figsize=(10, 11), sharex=True, constrained_layout=True)
    ax = axes[0]
    for cue in cues:
        mean = np.array(_series(q, f"value[{cue}]"))
        sd = np.array(_series(q, f"sd[{cue}]"))
        ok = ~np.isnan(mean)
        ax.plot(x[ok], mean[ok], ".-", ms=3, lw=1, color=colour[cue], label=cue)
        if np.any(np.nan_to_num(sd[ok]) > 0):
            ax.fill_between(x[ok], mean[ok] - sd[ok], mean[ok] + sd[ok], color=colour[cue], alpha=0.2, lw=0)
    ax.set_ylabel("learner's value at cue onset\n(mean ± sd)")
    ax.legend(loc="upper left", fontsize=8, ncol=max(1, len(cues)))

    ax = axes[1]
    for cue, name in behaviour:
        est = np.array(_series(q, f"{name}[{cue}]"))
        lo, hi = np.array(_series(q, f"{name}_lo95[{cue}]")), np.array(_series(q, f"{name}_hi95[{cue}]"))
        what = "P(respond)" if name == "p_respond" else "P(right)"
        ax.plot(x, est, lw=1.2, color=colour[cue], label=f"animal: {what} | {cue}")
        ax.fill_between(x, lo, hi, color=colour[cue], alpha=0.15, lw=0)
        model = np.array(_series(q, f"p_model[{cue}]"))
        ok = ~np.isnan(model)
        if ok.any():
            ax.plot(x[ok], model[ok], ".", ms=2, color=colour[cue], alpha=0.6, label=f"learner predicts | {cue}")
    p = np.array(_series(q, "p_correct"))
    if not behaviour or not np.all(np.isnan(p)):
        ax.plot(x, p, color="0.3", lw=0.8, ls="--", label="P(correct), all cues")
    if chance is not None:
        ax.axhline(chance, color="0.4", ls=":", lw=1, label="chance")
    ax.set_ylim(0, 1)
    ax.set_ylabel("the animal's responses\n(estimate, 95% band)")
    # beside the panel, where it hides no trial
    ax.legend(loc="upper left", bbox_to_anchor=(1.005, 1.0), fontsize=7, frameon=False)

    ax = axes[2]
    ax.plot(x, _series(q, "delta_cue"), ".", ms=3, label="δ at cue onset")
    ax.plot(x, _series(q, "delta_outcome"), ".", ms=3, label="δ at outcome")
    ax.axhline(0, color="0.5", lw=0.5)
    ax.set_ylabel("prediction error")
    ax.legend(loc="upper right", fontsize=8)

    ax = axes[3]
    t = list(trials) if trials is not None else []
    if t:
        total, last_session, water = 0.0, None, []
        for row in t:
            if row.get("session") != last_session:
                total, last_session = 0.0, row.get("session")
            total += float(row.get("reward_ul") or 0.0)
            water.append(total)
        ax.plot(np.arange(1, len(water) + 1), water, color="tab:blue", lw=1.2)
        ax.set_ylabel("µL delivered\n(this session)")
    elif d:
        p_next = np.array([float(r.get("reward_prob", np.nan)) for r in d])
        k = min(20, len(p_next))
        ax.plot(np.arange(1, len(d) + 1), np.convolve(p_next, np.ones(k) / k, mode="same"), color="tab:green")
        ax.set_ylim(-0.05, 1.05)
        ax.set_ylabel("reward probability\n(20-trial mean)")
    ax.set_xlabel("trial (all sessions, in order)")

    for i, label in _changes(d, "block")[1:]:
        for a in axes:
            a.axvline(i + 0.5, color="tab:purple", lw=0.8, ls="--")
        axes[0].annotate(label, (i + 0.5, 1.0), xycoords=("data", "axes fraction"), fontsize=7,
                         color="tab:purple", rotation=90, va="top", ha="right")
    for i, label in _changes(d, "stage")[1:]:
        for a in axes:
            a.axvline(i + 0.5, color="tab:orange", lw=1.2)
        axes[1].annotate(f"stage {label}", (i + 0.5, 0.02), xycoords=("data", "axes fraction"),
                         fontsize=7, color="tab:orange", rotation=90, va="bottom", ha="right")
    fig.suptitle(title or "rigloop report")
    fig.savefig(path, dpi=110)
    plt.close(fig)
    return path

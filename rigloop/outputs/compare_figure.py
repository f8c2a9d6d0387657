"""Figures for ``rigloop compare``: the cohort figure and, with ``--vary``, the trade-off plot.

Cohort figure, one column per question: (1) the ECDF of days to leave each measured
stage, per rule file (an animal that never left it ends the curve below 1: the gap is
the share that never did); (2) water earned per animal-day, per rule file, against the
daily minimum; (3) welfare events per 100 animal-days (interventions, days below the
minimum, sessions ended by disengagement). Trade-off plot (a grid of variants): days to
leave the first stage against the blocks ended before the animal had learned them, each
variant a point sized by its water per day.
(The trade-off plot's speed is the days to leave the last stage that advances.) Drawn through ``report.pyplot()``.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np

from . import report


def _colours(names: Sequence[str]) -> dict[str, str]:
    return {n: report.OKABE_ITO[i % len(report.OKABE_ITO)] for i, n in enumerate(names)}


def cohort_figure(path: str, comparison, doc: Mapping) -> str:
    """The cohort figure of a ``Comparison`` (and its document) to ``path`` (PNG/PDF/SVG)."""
    plt = report.pyplot()
    names, stages = comparison.names, comparison.stages
    colour = _colours(names)
    n_stage = max(len(stages), 1)
    fig = plt.figure(figsize=(4.0 * n_stage + 8.5, 4.2), layout="constrained")
    grid = fig.add_gridspec(1, n_stage + 2)
    days = comparison.days
    for k, stage in enumerate(stages or [None]):
        ax = fig.add_subplot(grid[0, k])
        for name in names:
            res = comparison.results[name]
            reached = np.sort([r.stage_day[stage] for r in res if stage in r.stage_day]) if stage else np.array([])
            x = np.concatenate([[0], reached, [days]])
            y = np.concatenate([[0], np.arange(1, len(reached) + 1) / len(res), [len(reached) / len(res)]])
            ax.step(x, y, where="post", color=colour[name], lw=1.6, label=name)
        target = comparison.targets.get(stage, "") if stage else ""
        ax.set_title(f"days to leave {stage}" + (f" (reach {target})" if target else "") if stage
                     else "no stage to leave", fontsize=9)
        ax.set_xlabel("days of training (fraction: share of that day's trials)", fontsize=8)
        ax.set_ylabel("fraction of animals that left it (ECDF)", fontsize=8)
        ax.set_xlim(0, days)
        ax.set_ylim(0, 1.02)
        ax.grid(alpha=0.3)
        if k == 0:
            ax.legend(fontsize=7, frameon=False, loc="upper left")
    ax = fig.add_subplot(grid[0, n_stage])
    water = [[w for r in comparison.results[n] for w in r.water_ul] for n in names]
    parts = ax.boxplot(water, patch_artist=True, widths=0.6, showfliers=True,
                       flierprops={"markersize": 2, "alpha": 0.4}, medianprops={"color": "black"})
    for patch, name in zip(parts["boxes"], names, strict=True):
        patch.set_facecolor(colour[name])
        patch.set_alpha(0.55)
    minimum = comparison.results[names[0]][0].daily_min_ul if comparison.results[names[0]] else None
    if minimum:
        ax.axhline(minimum, color="#D55E00", ls="--", lw=1)
        ax.text(0.52, minimum, " daily minimum", color="#D55E00", fontsize=7, va="bottom")
    ax.set_xticks(range(1, len(names) + 1), _short(names), fontsize=7)
    ax.set_ylabel("water earned on the rig per animal-day (µL)", fontsize=8)
    ax.set_title("water per day", fontsize=9)
    ax.grid(alpha=0.3, axis="y")
    ax = fig.add_subplot(grid[0, n_stage + 1])
    events = [("welfare interventions", "interventions_per_100_days", "mean"),
              ("days below minimum", "days_below_min_per_100", "mean"),
              ("disengaged sessions\n(per 100 sessions)", "disengaged_sessions_per_100", "mean")]
    width = 0.8 / len(names)
    for i, name in enumerate(names):
        values = [doc["rules"][name][key][stat] or 0.0 for _, key, stat in events]
        bars = ax.bar(np.arange(len(events)) + (i - (len(names) - 1) / 2) * width, values, width,
                      color=colour[name], label=name)
        ax.bar_label(bars, [f"{v:.0f}" for v in values], fontsize=6, padding=1)
    ax.set_xticks(range(len(events)), [e[0] for e in events], fontsize=7)
    ax.set_yscale("symlog", linthresh=10)  # interventions can be 100 times rarer events' counts
    ax.set_ylabel("events per 100 animal-days (mean over animals; log above 10)", fontsize=8)
    ax.set_title("welfare events", fontsize=9)
    ax.grid(alpha=0.3, axis="y")
    fig.suptitle(f"{len(comparison.results[names[0]])} simulated animals from '{comparison.population}', "
                 f"{days} days, same animals under each rule file", fontsize=10)
    fig.savefig(path, dpi=120)
    plt.close(fig)
    return path


def _short(names: Sequence[str], width: int = 22) -> list[str]:
    """Tick labels that fit: a long name breaks at its first space (a variant's rule file, then
    what it varies), and only a part still too long loses its start (variants differ at the end)."""

    def fit(part: str) -> str:
        return part if len(part) <= width else "…" + part[-(width - 1):]

    return ["\n".join(fit(p) for p in n.split(" ", 1)) if len(n) > width else n for n in names]


def tradeoff_figure(path: str, comparison, doc: Mapping) -> str:
    """Each variant: days to leave the last advancing stage (mean) against early block ends, sized by water."""
    plt = report.pyplot()
    names = comparison.names
    colour = _colours(names)
    stage = comparison.stages[-1] if comparison.stages else None  # leaving it: reaching the last stage
    fig, ax = plt.subplots(figsize=(7.5, 5.0), layout="constrained")
    rules = doc["rules"]
    water = np.array([rules[n]["water_per_day_ul"]["mean"] or 0.0 for n in names])
    sizes = 40 + 260 * (water - water.min()) / max(np.ptp(water), 1e-9)
    for name, size in zip(names, sizes, strict=True):
        x = (rules[name][f"days_to_leave:{stage}"]["mean"] if stage else None) or 0.0
        y = rules[name]["early_block_ends"]["mean"] or 0.0
        ax.scatter([x], [y], s=size, color=colour[name], alpha=0.8, edgecolor="black", lw=0.5)
        w = rules[name]["water_per_day_ul"]["mean"] or 0.0
        ax.annotate(f"{name}\n{w:.0f} µL/day", (x, y), textcoords="offset points", xytext=(8, 4), fontsize=7)
    target = comparison.targets.get(stage, stage) if stage else ""
    ax.set_xlabel(f"days to reach {target} (mean; never: the whole run, {comparison.days} days)" if stage
                  else "no stage to leave", fontsize=9)
    ax.xaxis.set_major_formatter("{x:.2f}")
    ax.set_ylabel("blocks ended before the animal had learned them (mean per animal)", fontsize=9)
    ax.set_title("speed against premature advances (point size: water per day)", fontsize=10)
    ax.grid(alpha=0.3)
    ax.margins(0.25)
    top = max([rules[n]["early_block_ends"]["mean"] or 0.0 for n in names] + [1.0])
    ax.set_ylim(-0.05 * top, 1.25 * top)  # a count: no room below zero
    fig.savefig(path, dpi=120)
    plt.close(fig)
    return path

"""The posterior-predictive figure: the animal's learning curve per cue inside the band
of its fitted model run on the same trials, and, for choice tasks, its stay probability
after a reward and after none against the model's range.

Plain numbers in (no fit objects), drawn through ``report.pyplot()``.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

from .report import OKABE_ITO, check_out, cue_colours, pyplot


def draw_predictive(
    path: str,
    *,
    curves: Mapping[str, Mapping[str, Sequence[float]]],
    session_starts: Sequence[int],
    ylabel: str,
    title: str,
    stay: Mapping[str, Mapping[str, float]] | None = None,
) -> str:
    """Write the figure to ``path`` and return it.

    curves: cue -> trial (x), animal, lower, median, upper, outside (bools).
    session_starts: trial indices where a new session begins (drawn as thin lines).
    stay: {"after_reward", "after_no_reward"} -> animal, lower, median, upper.
    """
    check_out(path)
    plt = pyplot()
    n = len(curves) + (1 if stay else 0)
    widths = [3] * len(curves) + ([1.5] if stay else [])
    fig, axes = plt.subplots(1, n, figsize=(3.6 * len(curves) + (2.0 if stay else 0), 3.8), squeeze=False,
                             gridspec_kw={"width_ratios": widths}, constrained_layout=True)
    axes = axes[0]
    colours = cue_colours(curves)
    for ax, (cue, c) in zip(axes, curves.items()):
        col = colours[cue]
        ax.fill_between(c["trial"], c["lower"], c["upper"], color=col, alpha=0.25, lw=0, label="model, 95% of runs")
        ax.plot(c["trial"], c["median"], color=col, lw=1, ls="--", label="model, median")
        ax.plot(c["trial"], c["animal"], color="#000000", lw=1.4, label="animal")
        out = [i for i, o in enumerate(c["outside"]) if o]
        if out:
            ax.scatter([c["trial"][i] for i in out], [c["animal"][i] for i in out], s=8, color=OKABE_ITO[4],
                       zorder=4, label="animal outside the band")
        frac = sum(bool(o) for o in c["outside"]) / max(len(c["outside"]), 1)
        for s in session_starts[1:]:
            ax.axvline(s, color="#bbbbbb", lw=0.6, zorder=0)
        ax.set_title(f"{cue}: {frac:.0%} outside", fontsize=9)
        ax.set_ylim(-0.02, 1.02)
        ax.set_xlabel("trial (all sessions)")
        ax.set_ylabel(ylabel)
        ax.spines[["top", "right"]].set_visible(False)
    axes[0].legend(loc="best", fontsize=7, frameon=False)
    if stay:
        ax = axes[-1]
        names = [("after_reward", "after\nreward"), ("after_no_reward", "after\nno reward")]
        for i, (key, label) in enumerate(names):
            s = stay[key]
            ax.plot([i, i], [s["lower"], s["upper"]], color=OKABE_ITO[3], lw=6, alpha=0.4, solid_capstyle="butt")
            ax.plot([i], [s["median"]], marker="_", color=OKABE_ITO[3], ms=16)
            ax.plot([i], [s["animal"]], marker="o", color="#000000", ms=6)
        ax.set_xticks([0, 1], [label for _, label in names])
        ax.set_xlim(-0.6, 1.6)
        ax.set_ylim(0, 1)
        ax.set_ylabel("P(same side as last choice)")
        ax.set_title("stay / switch\ndot animal, bar model", fontsize=9)
        ax.spines[["top", "right"]].set_visible(False)
    fig.suptitle(title, fontsize=10)
    fig.savefig(path, dpi=130)
    plt.close(fig)
    return path

"""One figure for a cohort: a row per animal with its own responses per cue (estimate and
95% band, the colours of the per-animal figure), its sessions, blocks and stages, and at
the bottom the water each animal earned per lab day against the daily minimum.

Draws through ``report.pyplot()`` (matplotlib is imported in ``report`` only). Reads the
same plain rows as ``report.plot_subject``, one bundle per subject.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

from ..errors import BadArgument
from . import report


def plot_cohort(subjects: Mapping[str, Mapping[str, Sequence[Any]]], path: str, *, title: str | None = None) -> str:
    """Write the cohort figure to ``path`` (PNG, or PDF/SVG by extension); returns ``path``.

    ``subjects``: per subject name, ``{"quantities": rows, "decisions": rows, "trials": rows,
    "sessions": SessionInfo list}`` as ``Store.rows`` and ``Store.sessions`` give them.
    """
    import numpy as np

    if not subjects:
        raise BadArgument("subjects", "at least one subject with stored trials", dict(subjects))
    plt = report.pyplot()
    behaviour = {name: sorted({(m.group(2), m.group(1)) for row in b["quantities"] for k in row
                               for m in [report._BEHAVIOUR.match(k)] if m}) for name, b in subjects.items()}
    colour = report.cue_colours(c for pairs in behaviour.values() for c, _ in pairs)
    n = len(subjects)
    fig = plt.figure(figsize=(11, 2.1 * n + 3.2), layout="constrained")
    grid = fig.add_gridspec(n + 1, 1, height_ratios=[2] * n + [2.4])
    water, shade_key = {}, []
    for row, (name, b) in enumerate(subjects.items()):
        ax = fig.add_subplot(grid[row])
        q, d, sessions = list(b["quantities"]), list(b["decisions"]), list(b.get("sessions", ()))
        x = np.arange(1, len(q) + 1)
        for cue, kind in behaviour[name]:
            est = np.array(report._series(q, f"{kind}[{cue}]"))
            lo = np.array(report._series(q, f"{kind}_lo95[{cue}]"))
            hi = np.array(report._series(q, f"{kind}_hi95[{cue}]"))
            what = "P(respond)" if kind == "p_respond" else "P(right)"
            ax.plot(x, est, lw=1.1, color=colour[cue], label=f"{what} | {cue}")
            ax.fill_between(x, lo, hi, color=colour[cue], alpha=0.2, lw=0)
        ran_under = report.schedule(d, sessions) if len(d) == len(q) else d
        if ran_under:
            shade_key = report.shade_blocks([ax], ran_under)
        report.mark_sessions([ax], [r.get("session") for r in d], label_axis=ax)
        ax.set_ylim(0, 1)
        ax.set_ylabel(f"{name}\n(probability, 95% band)", fontsize=8)
        ax.legend(handles=ax.get_legend_handles_labels()[0] + shade_key, loc="upper left",
                  bbox_to_anchor=(1.005, 1.0), fontsize=6.5, frameon=False)
        ax.set_xlabel("trial of this animal (all sessions, in order; count)", fontsize=8)
        if b.get("trials") and sessions:
            water[name] = report.daily_water(b["trials"], sessions)
    ax = fig.add_subplot(grid[n])
    greys = {s: str(0.2 + 0.55 * i / max(1, len(water) - 1)) for i, s in enumerate(water)}  # cue colours stay for cues
    if water:
        report.draw_water(ax, water, greys)
    every = sorted((s for b in subjects.values() for s in b.get("sessions", ())), key=lambda s: s.opened_at)
    # title_for names the rule files and the dates; the cohort's names replace "subject"
    fig.suptitle(title or report.title_for(", ".join(subjects), every).replace("subject ", f"cohort of {n}: ", 1),
                 fontsize=11)
    fig.savefig(path, dpi=120)
    plt.close(fig)
    return path

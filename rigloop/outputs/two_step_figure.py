"""The stay-probability figure of a two-step session: P(stay) after rewarded / unrewarded
trials, common vs rare transitions, bars with 95% Wilson intervals; with a hybrid fit, a
second panel shows the profile likelihood of w and its 95% interval.

Drawn through ``report.pyplot()`` (the one matplotlib import).
"""

from __future__ import annotations

import math
from collections.abc import Sequence

from typing import Any

from ..core.two_step.stay import StayCell
from .report import check_out, pyplot

CHI2_1_95 = 3.841458820694124  # the 95% point of χ² with 1 degree of freedom (as fit/two_step.py)

COMMON, RARE = "#0072B2", "#E69F00"  # Okabe-Ito blue and orange


def stay_figure(cells: Sequence[StayCell], out: str, *, title: str,
                hybrid: Any = None) -> str:
    """Write the figure to ``out`` (PNG, PDF or SVG) and return the path. hybrid: a
    ``fit.two_step.TwoStepFit`` of the hybrid with its profile (or None)."""
    check_out(out)
    plt = pyplot()
    panels = 2 if hybrid is not None and hybrid.profile else 1
    fig, axes = plt.subplots(1, panels, figsize=(4.2 * panels + 0.6, 3.8), squeeze=False)
    ax = axes[0][0]
    by = {(c.rewarded, c.common): c for c in cells}
    for j, (common, colour, name) in enumerate(((True, COMMON, "common"), (False, RARE, "rare"))):
        xs, ps, errs, ns = [], [], [[], []], []
        for i, rewarded in enumerate((True, False)):
            c = by[(rewarded, common)]
            x = i + (j - 0.5) * 0.36
            p = c.p if c.n else math.nan
            xs.append(x)
            ps.append(p)
            errs[0].append(p - c.low if c.n else 0.0)
            errs[1].append(c.high - p if c.n else 0.0)
            ns.append(c.n)
        ax.bar(xs, ps, width=0.34, color=colour, label=f"{name} transition", yerr=errs,
               capsize=4, error_kw={"elinewidth": 1.2})
        for x, p, n in zip(xs, ps, ns):
            ax.text(x, 0.03, f"n={n}", ha="center", va="bottom", fontsize=7, color="white")
    ax.set_xticks([0, 1], ["rewarded", "unrewarded"])
    ax.set_xlabel("previous trial")
    ax.set_ylabel("P(repeat first-stage choice)")
    ax.set_ylim(0, 1.12)
    ax.set_yticks([0, 0.2, 0.4, 0.6, 0.8, 1.0])
    ax.axhline(0.5, color="0.6", lw=0.8, ls=":")
    ax.legend(loc="upper center", fontsize=8, frameon=False, ncol=2)
    ax.set_title("stay probability (bars: 95% intervals)", fontsize=9)
    if panels == 2:
        _profile_panel(axes[0][1], hybrid)
    fig.suptitle(title, fontsize=10)
    fig.tight_layout()
    fig.savefig(out, dpi=150)
    plt.close(fig)
    return out


def _profile_panel(ax, fit: Any) -> None:
    ws = [w for w, _ in fit.profile]
    best = min(v for _, v in fit.profile)
    best = min(best, -fit.log_likelihood)
    dev = [2.0 * (v - best) for _, v in fit.profile]
    ax.plot(ws, dev, "o-", color="0.2", ms=4)
    ax.axhline(CHI2_1_95, color=RARE, ls="--", lw=1, label="95% threshold (χ²₁)")
    low, high = fit.w_interval
    ax.axvspan(low, high, color=COMMON, alpha=0.15, label=f"95% interval [{low:.2f}, {high:.2f}]")
    ax.axvline(fit.params["w"], color=COMMON, lw=1.5, label=f"ŵ = {fit.params['w']:.2f}")
    ax.set_xlim(-0.02, 1.02)
    ax.set_ylim(0, 1.45 * max(8.0, min(max(dev), 30.0)))  # headroom for the legend
    ax.set_xlabel("w\n(0: repeats what paid; 1: plans from the task's structure)", fontsize=8)
    ax.set_ylabel("2 × (log-lik. at ŵ − profile log-lik.)")
    ax.legend(fontsize=7, frameon=False, loc="upper center")
    ax.set_title("profile likelihood of w (hybrid fit)", fontsize=9)

"""The psychometric figure: binned data with binomial intervals (point area by trials),
the fitted curve and its band, the threshold with its interval, and the staircase's
convergence point beside the level its rule should converge on.

Plain numbers in (no fit objects), drawn through ``report.pyplot()``.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

from .report import OKABE_ITO, check_out, pyplot


def draw_psychometric(
    path: str,
    *,
    bins: Mapping[str, Sequence[float]],
    grid: Sequence[float],
    curve: Sequence[float],
    band: tuple[Sequence[float], Sequence[float]] | None,
    level: float,
    threshold: float,
    threshold_ci: tuple[float, float] | None,
    guess: float,
    title: str,
    xlabel: str,
    ylabel: str,
    staircase: Mapping[str, Any] | None = None,
) -> str:
    """Write the figure to ``path`` (PNG, PDF or SVG) and return the path.

    bins: x, p, lower, upper, n per bin. staircase: {"level", "target", "rule"} of the
    track's convergence point and its rule's target (Levitt 1971), or None.
    """
    check_out(path)
    plt = pyplot()
    fig, ax = plt.subplots(figsize=(7.0, 5.2), constrained_layout=True)
    data_c, fit_c, mark_c = "#000000", OKABE_ITO[3], OKABE_ITO[4]
    if band is not None:
        ax.fill_between(grid, band[0], band[1], color=fit_c, alpha=0.18, lw=0,
                        label="fitted curve, 95% band (bootstrap)")
    ax.plot(grid, curve, color=fit_c, lw=2, label="fitted curve" if band is None else None)
    n = [float(v) for v in bins["n"]]
    biggest = max(n) if n else 1.0
    sizes = [12 + 180 * v / biggest for v in n]
    yerr = [[p - lo for p, lo in zip(bins["p"], bins["lower"])],
            [hi - p for p, hi in zip(bins["p"], bins["upper"])]]
    ax.errorbar(bins["x"], bins["p"], yerr=yerr, fmt="none", ecolor="#777777", elinewidth=1, capsize=0,
                zorder=2)
    ax.scatter(bins["x"], bins["p"], s=sizes, color=data_c, alpha=0.75, zorder=3,
               label=f"animal, binned (area ∝ trials, {int(biggest)} max; 95% Wilson)")
    ax.axhline(guess, color="#999999", lw=0.8, ls=":", zorder=1)
    ax.axhline(level, color=fit_c, lw=0.8, ls="--", zorder=1)
    if threshold == threshold:
        ax.plot([threshold], [level], marker="v", color=fit_c, ms=9, zorder=4,
                label=f"threshold at {level:.0%}: {threshold:.3g}"
                      + (f" [{threshold_ci[0]:.3g}, {threshold_ci[1]:.3g}]" if threshold_ci else ""))
        if threshold_ci is not None:
            ax.plot(threshold_ci, [level, level], color=fit_c, lw=4, alpha=0.6, solid_capstyle="butt",
                    zorder=4)
    if staircase is not None and staircase.get("level") is not None:
        target = staircase.get("target")
        lab = f"staircase converged at {staircase['level']:.3g}"
        if target is not None:
            lab += f" ({staircase['rule']} → {target:.1%} correct)"
        ax.plot([staircase["level"]], [target if target is not None else level], marker="D", color=mark_c,
                ms=8, mfc="none", mew=2, zorder=5, label=lab)
        if target is not None:
            ax.axhline(target, color=mark_c, lw=0.8, ls="-.", zorder=1)
    ax.set_ylim(min(guess, min(bins["lower"], default=guess)) - 0.05, 1.02)
    ax.set_xlabel(xlabel)
    ax.set_ylabel(ylabel)
    ax.set_title(title, fontsize=10)
    ax.spines[["top", "right"]].set_visible(False)
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.14), ncol=2, fontsize=8, frameon=False)
    fig.savefig(path, dpi=130)
    plt.close(fig)
    return path

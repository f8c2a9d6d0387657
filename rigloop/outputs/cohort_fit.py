"""One figure per cohort fit: each parameter's animals against their population.

One panel per fitted parameter, one row per animal: the animal's own estimate with its
95% interval (±1.96 standard errors on the fitted scale, mapped back; none where the
estimate sat on a bound), an arrow to its shrunken estimate, and the population's
median with the band holding 68% of animals (μ ± σ on the fitted scale). Outliers are
drawn in vermillion and named in the legend. Log-scale parameters get a log axis.

The figure is drawn from a ``fit.cohort.CohortFit`` (read through its attributes) by
``report.pyplot()``, the one matplotlib import.
"""

from __future__ import annotations

import math

from .report import check_out, pyplot

BLUE, VERMILLION, GREY, ORANGE = "#0072B2", "#D55E00", "#999999", "#E69F00"  # Okabe–Ito


def draw_cohort_fit(cohort, path: str) -> str:
    """Write the cohort figure to ``path`` (.png, .pdf or .svg); returns the path."""
    check_out(path)
    plt = pyplot()
    names = list(cohort.names)
    animals = list(cohort.animals)
    N = len(animals)
    cols = min(len(names), 3)
    rows = math.ceil(len(names) / cols)
    fig, axes = plt.subplots(rows, cols, figsize=(4.2 * cols, 0.9 + rows * (1.0 + 0.22 * N)),
                             squeeze=False)
    ys = list(range(N))[::-1]
    for ax, name in zip(axes.flat, names, strict=False):
        scale = cohort.scales[name]
        lo, hi = cohort.band(name)
        ax.axvspan(lo, hi, color=GREY, alpha=0.25, lw=0, label="population: 68% of animals")
        ax.axvline(cohort.median(name), color=GREY, lw=1.5, label="population median")
        for y, a in zip(ys, animals, strict=True):
            colour = VERMILLION if a.outlier else BLUE
            own, shrunk = a.params[name], a.shrunken[name]
            if a.u_var[name] < 99.0:
                half = 1.96 * math.sqrt(a.u_var[name])
                ax.plot([scale.from_u(a.u[name] - half), scale.from_u(a.u[name] + half)], [y, y],
                        color=colour, lw=1, alpha=0.6)
            ax.plot(own, y, "o", color=colour, ms=4)
            ax.annotate("", xy=(shrunk, y), xytext=(own, y),
                        arrowprops={"arrowstyle": "->", "color": ORANGE, "lw": 1.2})
            ax.plot(shrunk, y, "D", color=ORANGE, ms=3.5)
        if scale.kind == "log":
            ax.set_xscale("log")
        ax.set_yticks(ys, [a.name for a in animals], fontsize=7)
        ax.set_title(f"{name} ({scale.kind} scale)", fontsize=10)
        ax.grid(axis="x", alpha=0.3)
    for ax in list(axes.flat)[len(names):]:
        ax.axis("off")
    handles = [
        plt.Line2D([], [], marker="o", color=BLUE, lw=1, label="animal's own estimate, 95% interval"),
        plt.Line2D([], [], marker="D", color=ORANGE, lw=0, label="shrunken estimate (arrow from own)"),
        plt.Line2D([], [], color=GREY, lw=1.5, label="population median"),
        plt.Rectangle((0, 0), 1, 1, color=GREY, alpha=0.25, label="68% of animals (population sd)"),
    ]
    flagged = [a.name for a in animals if a.outlier]
    if flagged:
        handles.append(plt.Line2D([], [], marker="o", color=VERMILLION, lw=1,
                                  label=f"outlier: {', '.join(flagged)}"))
    fig.legend(handles=handles, loc="lower center", ncol=min(len(handles), 3), fontsize=8,
               frameon=False)
    fig.suptitle(f"cohort fit: {N} animals, learner {cohort.learner} (empirical-Bayes population)",
                 fontsize=11)
    fig.tight_layout(rect=(0, 0.08 if N < 20 else 0.04, 1, 0.96))
    fig.savefig(path, dpi=120)
    plt.close(fig)
    return path

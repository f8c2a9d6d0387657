"""Per-rule summaries, paired differences with bootstrap intervals, and plain-word verdicts.

Every rule file ran on the same animals (``compare.py``), so a difference is taken per
animal (B's value minus A's) and resampled over animals together (a paired bootstrap,
percentile interval; Efron & Tibshirani 1993, *An Introduction to the Bootstrap*, ch. 13).

Days to leave a stage are days of training, fractional (the share of the day's trials
done when it left): 2.5 is halfway through day 3. An animal that never left it counts
as the whole run (censored at ``days``), so a difference in days is a lower bound on the
gain when many animals never get there; the fraction that never did is reported beside
it. Trials to leave a stage compare only the animals that left it under both files.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from ..errors import BadArgument
from .compare import AnimalResult

BOOTSTRAP = 2000


def stage_targets(spec) -> dict[str, str]:
    """Stage -> the stage its advance leads to, for the stages a schedule can advance out of."""
    return {name: st.advance.to for name, st in spec.stages.items() if st.advance is not None}


def animal_measures(r: AnimalResult, stages: Sequence[str]) -> dict[str, float]:
    """One animal's value of every measure (NaN where it has none, e.g. no reversal)."""
    days = max(r.days, 1)
    out = {}
    for s in stages:
        out[f"days_to_leave:{s}"] = float(r.stage_day.get(s, r.days))
        out[f"trials_to_leave:{s}"] = float(r.stage_trial[s]) if s in r.stage_trial else math.nan
    out["water_per_day_ul"] = float(np.mean(r.water_ul)) if r.water_ul else math.nan
    out["days_below_min_per_100"] = 100.0 * r.days_below_min / days
    out["interventions_per_100_days"] = 100.0 * r.interventions / days
    out["disengaged_sessions_per_100"] = 100.0 * r.disengaged / max(r.sessions, 1)
    out["reversal_lag_trials"] = r.median_lag if r.median_lag is not None else math.nan
    out["early_block_ends"] = float(r.early)
    return out


def summarise(results: Sequence[AnimalResult], stages: Sequence[str]) -> dict[str, dict]:
    """Per measure: median, IQR, mean and n over the animals that have it; for stages also
    the fraction that never left it; for water also the share of animal-days below the minimum."""
    rows = [animal_measures(r, stages) for r in results]
    out: dict[str, dict] = {}
    for key in rows[0] if rows else ():
        values = np.array([row[key] for row in rows], dtype=float)
        if key.startswith("days_to_leave:"):
            left = np.array([key.split(":", 1)[1] in r.stage_day for r in results])
            out[key] = _spread(values[left]) | {"never": _round(1.0 - left.mean())}
        else:
            out[key] = _spread(values[~np.isnan(values)])
    if results:
        all_days = [w for r in results for w in r.water_ul]
        below = sum(r.days_below_min for r in results)
        out["water_per_day_ul"]["animal_days_below_min"] = below
        out["water_per_day_ul"]["fraction_days_below_min"] = _round(below / max(len(all_days), 1))
        out["water_per_day_ul"]["daily_min_ul"] = results[0].daily_min_ul
        out["interventions_per_100_days"]["total"] = sum(r.interventions for r in results)
        out["disengaged_sessions_per_100"]["total"] = sum(r.disengaged for r in results)
    return out


def _spread(values: np.ndarray) -> dict:
    if not len(values):
        return {"median": None, "q1": None, "q3": None, "mean": None, "n": 0}
    q1, med, q3 = np.percentile(values, [25.0, 50.0, 75.0])
    return {"median": _round(med), "q1": _round(q1), "q3": _round(q3), "mean": _round(values.mean()),
            "n": int(len(values))}


def _round(x) -> float | None:
    x = float(x)
    return round(x, 4) if math.isfinite(x) else None


def paired_bootstrap(a: Sequence[float], b: Sequence[float], *, n_boot: int = BOOTSTRAP,
                     seed: int = 0) -> dict[str, float | None]:
    """Mean of b - a over the animals with both values, and its percentile 95% interval
    from ``n_boot`` resamples of animals (pairs kept together)."""
    a, b = np.asarray(a, dtype=float), np.asarray(b, dtype=float)
    if a.shape != b.shape:
        raise BadArgument("b", f"one value per animal, as a ({a.shape[0]})", b.shape[0])
    d = (b - a)[~(np.isnan(a) | np.isnan(b))]
    if not len(d):
        return {"estimate": None, "lo95": None, "hi95": None, "n": 0}
    rng = np.random.default_rng(seed)
    means = d[rng.integers(0, len(d), size=(n_boot, len(d)))].mean(axis=1)
    lo, hi = np.percentile(means, [2.5, 97.5])
    return {"estimate": _round(d.mean()), "lo95": _round(lo), "hi95": _round(hi), "n": int(len(d))}


def pair_differences(a: Sequence[AnimalResult], b: Sequence[AnimalResult], stages: Sequence[str],
                     seed: int = 0) -> dict[str, dict]:
    """Every measure's paired difference (B - A) with its bootstrap interval."""
    ra = [animal_measures(r, stages) for r in a]
    rb = [animal_measures(r, stages) for r in b]
    keys = list(ra[0]) if ra else []
    return {k: paired_bootstrap([x[k] for x in ra], [x[k] for x in rb], seed=seed + i) for i, k in enumerate(keys)}


def _excludes_zero(d: dict) -> bool:
    return d["estimate"] is not None and (d["lo95"] > 0 or d["hi95"] < 0)


def _interval(d: dict, digits: int = 1) -> str:
    lo, hi = sorted((abs(d["lo95"]), abs(d["hi95"]))) if _excludes_zero(d) else (d["lo95"], d["hi95"])
    if _excludes_zero(d):
        return f"({lo:.{digits}f}–{hi:.{digits}f})"
    return f"({lo + 0.0:+.{digits}f} to {hi + 0.0:+.{digits}f})".replace("-0.0 ", "+0.0 ").replace("-0 ", "+0 ")


def verdict(a_name: str, b_name: str, diffs: dict[str, dict], targets: dict[str, str],
            summary_a: dict, summary_b: dict) -> str:
    """One plain sentence: when B gets animals through each stage, its water, and welfare."""
    parts = []
    for stage, to in targets.items():
        d = diffs.get(f"days_to_leave:{stage}")
        if d is None or d["estimate"] is None:
            continue
        na, nb = summary_a[f"days_to_leave:{stage}"]["never"], summary_b[f"days_to_leave:{stage}"]["never"]
        t = diffs.get(f"trials_to_leave:{stage}")
        if na == nb == 1.0:
            parts.append(f"gets no animal to `{to}`, as {a_name} does not")
            continue
        if _excludes_zero(d) and abs(d["estimate"]) >= 0.5:  # half a day or more: say it in days
            word = "sooner" if d["estimate"] < 0 else "later"
            text = f"reaches `{to}` {abs(d['estimate']):.1f} days {word} {_interval(d)}"
        elif t and _excludes_zero(t):
            word = "sooner" if t["estimate"] < 0 else "later"
            text = f"reaches `{to}` {abs(t['estimate']):.0f} trials {word} {_interval(t, 0)}"
        elif _excludes_zero(d):
            word = "sooner" if d["estimate"] < 0 else "later"
            text = f"reaches `{to}` {abs(d['estimate']):.2f} days {word} {_interval(d, 2)}"
        elif max(abs(d["lo95"]), abs(d["hi95"])) < 0.005:  # within a few trials of each other
            text = f"reaches `{to}` at the same point"
        else:
            digits = 2 if max(abs(d["lo95"]), abs(d["hi95"])) < 0.1 else 1
            text = f"reaches `{to}` at about the same time (difference {_interval(d, digits)[1:-1]} days)"
        if na is not None and nb is not None and abs(nb - na) >= 0.05:
            text += f" ({100 * nb:.0f}% never do, against {100 * na:.0f}%)"
        parts.append(text)
    w = diffs.get("water_per_day_ul")
    base = (summary_a.get("water_per_day_ul") or {}).get("mean") or 0.0
    if w and w["estimate"] is not None and _excludes_zero(w) and abs(w["estimate"]) >= 0.05 * max(base, 1.0):
        parts.append(f"{abs(w['estimate']):.0f} µL {'more' if w['estimate'] > 0 else 'less'} water a day "
                     f"{_interval(w, 0)}")
    else:
        parts.append("same water")
    below = diffs.get("days_below_min_per_100")
    if below and _excludes_zero(below):
        parts.append(f"{abs(below['estimate']):.0f} {'more' if below['estimate'] > 0 else 'fewer'} days below the "
                     "daily water minimum per 100 animal-days")
    iv = diffs.get("interventions_per_100_days")
    if iv and _excludes_zero(iv):
        parts.append(f"{abs(iv['estimate']):.0f} {'more' if iv['estimate'] > 0 else 'fewer'} welfare "
                     "interventions per 100 animal-days")
    else:
        parts.append("about as many welfare interventions")
    early = diffs.get("early_block_ends")
    if early and _excludes_zero(early):
        parts.append(f"{abs(early['estimate']):.1f} {'more' if early['estimate'] > 0 else 'fewer'} blocks per "
                     "animal ended before the animal had learned them")
    return f"{b_name} " + ", ".join(parts) + f" (than {a_name})."

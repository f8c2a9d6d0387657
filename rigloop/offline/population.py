"""Populations: a cohort of simulated animals described in a TOML file, drawn from a seed.

A population file has a ``[population]`` table (``name``, ``description``) and one
table per group under ``[population.groups.NAME]``::

    [population.groups.quick]
    preset = "fast_learner"        # a preset of simulate.py (PRESETS; two-stage task: TWO_STEP_PRESETS)
    fraction = 0.3                 # share of the cohort; the fractions sum to 1
    alpha = { dist = "lognormal", median = 0.3, sigma = 0.3, hi = 1.0 }
    beta = { dist = "normal", mean = 8.0, sd = 2.0, lo = 2.0, hi = 14.0 }
    lapse = { dist = "uniform", lo = 0.02, hi = 0.1 }
    engagement = 200               # a plain number: fixed

    [population.groups.m14]
    fitted = "fits/m14.json"       # `rigloop fit --json` output (path relative to this file)
    fraction = 0.1

A group's other keys are SimulatedAnimal parameters (``PARAMETERS``), fixed or drawn
per animal — the two-stage task's animals take the learner's own (alpha1, alpha2, lam,
beta1, beta2, p, w; Daw et al. 2011) with bias and lapse, and each task ignores the
other's, so one population serves rule files of both kinds; ``lo``/``hi`` truncate any distribution (by redrawing), and a distribution
whose range can leave the parameter's valid range is refused, naming the bound to add.
A fitted group's animals take the best-ranked fit's parameters (learning rate, β, θ as
the response threshold, lapse, bias); a group key given beside it wins.

``draw_animals(population, n, seed)`` gives N animals: group sizes by largest remainder,
parameters from ``numpy.random.default_rng([seed, i])`` for animal i, so the same seed
always gives the same cohort and animal i does not change when N grows.
"""

from __future__ import annotations

import json
import math
import pathlib
import tomllib
from dataclasses import dataclass, field
from importlib import resources

import numpy as np

from ..core.names import closest
from ..core.two_step.params import BOUNDS as TWO_STEP_BOUNDS
from ..errors import BadArgument, RuleError
from .simulate import PRESETS, SimulatedAnimal, preset_animal
from .sweep import mix_presets
from .two_step_sim import TWO_STEP_PRESETS

# parameter -> (lowest valid, highest valid, whole number?)
PARAMETERS: dict[str, tuple[float, float, bool]] = {
    "alpha": (0.0, 1.0, False),
    "alpha_down": (0.0, 1.0, False),
    "beta": (0.0, 100.0, False),
    "threshold": (-5.0, 5.0, False),
    "lick_cost": (-5.0, 0.0, False),
    "lapse": (0.0, 1.0, False),
    "bias": (-10.0, 10.0, False),
    "engagement": (1, 100_000, True),
    "fixed_p_respond": (0.0, 1.0, False),
    "false_alarm_timeout_s": (0.0, 600.0, False),
    **{name: (low, high, False) for name, (low, high) in TWO_STEP_BOUNDS.items()},  # two-stage task
}
DISTRIBUTIONS = {"lognormal": ("median", "sigma"), "normal": ("mean", "sd"), "uniform": ("lo", "hi"),
                 "fixed": ("value",)}
_GROUP_KEYS = ("preset", "fitted", "fraction")
_FIT_TO_ANIMAL = {"alpha": "alpha", "beta": "beta", "theta": "threshold", "lapse": "lapse", "bias": "bias"}
_TRIES = 10_000


class PopulationError(RuleError):
    """A population file is invalid; ``problems`` lists every fault found."""

    def __init__(self, problems: list[str], source: str | None = None):
        super().__init__(problems, source)
        head = f"{source}: " if source else ""
        n = len(self.problems)
        lines = "\n".join(f"  - {p}" for p in self.problems)
        self.args = (f"{head}{n} problem{'s' if n != 1 else ''} in population file:\n{lines}",)

    def __str__(self) -> str:
        return self.args[0]


@dataclass(frozen=True)
class Group:
    """One kind of animal in the cohort: a preset (or fitted parameters) and distributions."""

    name: str
    preset: str
    fraction: float
    params: dict = field(default_factory=dict)  # name -> a number (fixed) or a distribution dict
    fitted_from: str | None = None


@dataclass(frozen=True)
class Population:
    name: str
    description: str
    groups: tuple[Group, ...]
    source: str = "<string>"


@dataclass(frozen=True)
class AnimalDraw:
    """One drawn animal: picklable, so it travels to a worker; ``build`` makes the animal."""

    subject: str
    group: str
    preset: str
    params: dict
    seed: int

    def build(self, rules, subject: str | None = None) -> SimulatedAnimal:
        """The SimulatedAnimal for ``rules`` (its task and cues), with the drawn parameters."""
        return preset_animal(self.preset, rules, subject or self.subject, self.seed, **self.params)


# --------------------------------------------------------------------------- reading


def is_population_text(text: str) -> bool:
    """Does this TOML text describe a population (a ``[population]`` table)?"""
    try:
        return isinstance(tomllib.loads(text).get("population"), dict)
    except tomllib.TOMLDecodeError:
        return False


def example_population_names() -> list[str]:
    folder = resources.files("rigloop.examples").joinpath("populations")
    return sorted(p.name[:-5] for p in folder.iterdir() if p.name.endswith(".toml"))


def load_population(name_or_path: str) -> Population:
    """A population file by path, or a shipped example by name; RuleError lists every problem."""
    p = pathlib.Path(name_or_path)
    if p.suffix == ".toml" or p.exists():
        try:
            text = p.read_text(encoding="utf-8")
        except OSError as err:
            raise PopulationError([f"cannot read the population file: {err.strerror or err}"], str(p)) from None
        return parse_population(text, source=str(p), base=p.parent)
    names = example_population_names()
    if name_or_path not in names:
        near = closest(name_or_path, names)
        hint = f"; did you mean {near!r}?" if near else ""
        raise PopulationError([f"no population file {name_or_path!r}: give a path to a .toml file or a shipped "
                         f"population ({', '.join(names)}){hint}"], name_or_path)
    folder = resources.files("rigloop.examples").joinpath("populations")
    text = folder.joinpath(f"{name_or_path}.toml").read_text(encoding="utf-8")
    return parse_population(text, source=f"example:{name_or_path}", base=pathlib.Path(str(folder)))


def parse_population(text: str, source: str = "<string>", base: pathlib.Path | None = None) -> Population:
    """Read and check a population file's text; every problem is reported at once."""
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise PopulationError([f"not valid TOML: {err}"], source) from None
    table = data.get("population")
    problems: list[str] = []
    if not isinstance(table, dict):
        raise PopulationError(["a population file needs a [population] table with [population.groups.NAME] tables"],
                        source)
    for key in data:
        if key != "population":
            problems.append(f"{key}: unknown top-level key (a population file has only [population])")
    for key in table:
        if key not in ("name", "description", "groups"):
            problems.append(f"population.{key}: unknown key (allowed: name, description, groups)")
    groups_table = table.get("groups")
    if not isinstance(groups_table, dict) or not groups_table:
        problems.append("population.groups: needs at least one [population.groups.NAME] table")
        groups_table = {}
    groups = [g for name, g_table in groups_table.items()
              if (g := _group(name, g_table, base or pathlib.Path("."), problems)) is not None]
    total = sum(g.fraction for g in groups)
    if groups and len(groups) == len(groups_table) and abs(total - 1.0) > 1e-6:
        problems.append(f"population.groups: the fractions sum to {total:g}; they must sum to 1")
    if problems:
        raise PopulationError(problems, source)
    name = str(table.get("name", pathlib.Path(source).stem))
    return Population(name, str(table.get("description", "")), tuple(groups), source)


def _group(name: str, table, base: pathlib.Path, problems: list[str]) -> Group | None:
    path = f"population.groups.{name}"
    if not isinstance(table, dict):
        problems.append(f"{path}: must be a table with preset (or fitted) and fraction")
        return None
    n0 = len(problems)
    fraction = table.get("fraction")
    if isinstance(fraction, bool) or not isinstance(fraction, (int, float)) or not 0 < fraction <= 1:
        problems.append(f"{path}.fraction: must be a number in (0, 1] (got {fraction!r})")
    preset, fitted = table.get("preset"), table.get("fitted")
    params: dict = {}
    if fitted is not None:
        if preset is not None:
            problems.append(f"{path}: give preset or fitted, not both")
        params = _fitted_params(fitted, base, f"{path}.fitted", problems)
        preset = "typical"
    elif preset is None:
        problems.append(f"{path}: needs preset = one of {', '.join(PRESETS)} (or fitted = \"FIT.json\")")
    elif preset not in PRESETS and preset not in TWO_STEP_PRESETS:
        near = closest(str(preset), [*PRESETS, *TWO_STEP_PRESETS])
        hint = f"; did you mean {near!r}?" if near else ""
        agents = ", ".join(p for p in TWO_STEP_PRESETS if p not in PRESETS)
        problems.append(f"{path}.preset: {preset!r} is not a preset (presets: {', '.join(PRESETS)}; "
                        f"two-stage task also {agents}){hint}")
    for key, value in table.items():
        if key in _GROUP_KEYS:
            continue
        if key not in PARAMETERS:
            near = closest(key, list(PARAMETERS))
            hint = f"; did you mean {near!r}?" if near else ""
            problems.append(f"{path}.{key}: unknown key (a group has {', '.join(_GROUP_KEYS)} and the animal's "
                            f"parameters {', '.join(PARAMETERS)}){hint}")
            continue
        checked = _parameter(f"{path}.{key}", key, value, problems)
        if checked is not None:
            params[key] = checked
    if len(problems) > n0:
        return None
    return Group(name, str(preset), float(fraction), params, str(fitted) if fitted is not None else None)


def _parameter(path: str, key: str, value, problems: list[str]):
    """A fixed number or a checked distribution table for parameter ``key``; None if faulty."""
    low, high, whole = PARAMETERS[key]
    if isinstance(value, bool) or not isinstance(value, (int, float, dict)):
        problems.append(f"{path}: must be a number or a distribution table such as "
                        f"{{ dist = \"uniform\", lo = {low:g}, hi = {high:g} }} (got {value!r})")
        return None
    if not isinstance(value, dict):
        if whole and value != int(value) or not low <= value <= high:
            kind = "a whole number" if whole else "a number"
            problems.append(f"{path}: must be {kind} from {low:g} to {high:g} (got {value!r})")
            return None
        return int(value) if whole else float(value)
    if whole:
        problems.append(f"{path}: a whole-number parameter takes a fixed value, not a distribution")
        return None
    dist = value.get("dist")
    if dist not in DISTRIBUTIONS:
        problems.append(f"{path}.dist: must be one of {', '.join(DISTRIBUTIONS)} (got {dist!r})")
        return None
    needed = DISTRIBUTIONS[dist]
    allowed = {"dist", *needed, "lo", "hi"}
    n0 = len(problems)
    for k, v in value.items():
        if k not in allowed:
            problems.append(f"{path}.{k}: unknown key for a {dist} (allowed: {', '.join(sorted(allowed))})")
        elif k != "dist" and (isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v)):
            problems.append(f"{path}.{k}: must be a finite number (got {v!r})")
    for k in needed:
        if k not in value:
            problems.append(f"{path}: a {dist} needs {' and '.join(needed)} (missing {k})")
    if len(problems) > n0:
        return None
    d = {k: (v if k == "dist" else float(v)) for k, v in value.items()}
    if dist == "lognormal" and (d["median"] <= 0 or d["sigma"] < 0):
        problems.append(f"{path}: a lognormal needs median > 0 and sigma >= 0")
        return None
    if dist == "normal" and d["sd"] < 0:
        problems.append(f"{path}.sd: must be >= 0")
        return None
    lo, hi = _support(d)
    if not lo < hi and dist != "fixed":
        problems.append(f"{path}: its range [{lo:g}, {hi:g}] is empty: lo must be below hi")
        return None
    if lo < low or hi > high:
        fix = f"add hi = {high:g} (or lower)" if hi > high else f"add lo = {low:g} (or higher)"
        problems.append(f"{path}: the {dist} reaches [{lo:g}, {hi:g}] but {key} must lie in [{low:g}, {high:g}]: "
                        f"{fix}")
        return None
    if _mass(d) < 1e-3:
        problems.append(f"{path}: lo and hi keep almost none of the {dist}'s probability; widen them")
        return None
    return d


def _support(d: dict) -> tuple[float, float]:
    """The range a (truncated) distribution's draws can take."""
    if d["dist"] == "fixed":
        return d["value"], d["value"]
    if d["dist"] == "uniform":
        lo, hi = d["lo"], d["hi"]
    elif d["dist"] == "lognormal":
        lo, hi = d.get("lo", 0.0), d.get("hi", math.inf)
        if d["sigma"] == 0:
            lo, hi = max(lo, d["median"]), min(hi, d["median"])
    else:
        lo, hi = d.get("lo", -math.inf), d.get("hi", math.inf)
    return lo, hi


def _mass(d: dict) -> float:
    """The probability the truncation keeps (the normal CDF by math.erf)."""
    if d["dist"] in ("fixed", "uniform"):
        return 1.0
    if d["dist"] == "lognormal":
        if d["sigma"] == 0:
            return 1.0
        mu, s = math.log(d["median"]), d["sigma"]
        lo = math.log(d["lo"]) if d.get("lo", 0.0) > 0 else -math.inf
        hi = math.log(d["hi"]) if "hi" in d else math.inf
    else:
        mu, s, lo, hi = d["mean"], d["sd"], d.get("lo", -math.inf), d.get("hi", math.inf)
        if s == 0:
            return 1.0 if lo <= mu <= hi else 0.0

    def cdf(x: float) -> float:
        return 0.5 * (1 + math.erf((x - mu) / (s * math.sqrt(2)))) if math.isfinite(x) else float(x > 0)

    return cdf(hi) - cdf(lo)


def _fitted_params(fitted, base: pathlib.Path, path: str, problems: list[str]) -> dict:
    """An animal's parameters from a `rigloop fit --json` file (its best-ranked fit)."""
    if not isinstance(fitted, str):
        problems.append(f"{path}: must be the path of a `rigloop fit --json` output file (got {fitted!r})")
        return {}
    p = pathlib.Path(fitted)
    p = p if p.is_absolute() else base / p
    try:
        doc = json.loads(p.read_text(encoding="utf-8"))
    except (OSError, json.JSONDecodeError) as err:
        problems.append(f"{path}: cannot read {str(p)!r} as `rigloop fit --json` output ({err})")
        return {}
    try:
        return fitted_parameters(doc)
    except BadArgument as err:
        problems.append(f"{path}: {err}")
        return {}


def fitted_parameters(doc) -> dict:
    """SimulatedAnimal parameters from `rigloop fit --json` output: the best-ranked fit's
    learning rate, β, θ (the response threshold), lapse and bias, where it has them."""
    fits = doc.get("fits") if isinstance(doc, dict) else None
    if not isinstance(fits, list) or not fits:
        raise BadArgument("fit file", 'the JSON `rigloop fit --json` writes: {"subject", "fits": [...], "ranking"}',
                          type(doc).__name__)
    ranking = doc.get("ranking") or []
    best = next((f for name in ranking for f in fits if isinstance(f, dict) and f.get("learner") == name), fits[0])
    params = best.get("params") if isinstance(best, dict) else None
    if not isinstance(params, dict):
        raise BadArgument("fit file", "a fit with a params table", best)
    out = {}
    for fit_name, animal_name in _FIT_TO_ANIMAL.items():
        v = params.get(fit_name)
        if isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v):
            low, high, _ = PARAMETERS[animal_name]
            out[animal_name] = float(min(max(v, low), high))
    return out


# --------------------------------------------------------------------------- drawing


def draw_animals(population: Population, n: int, seed: int) -> list[AnimalDraw]:
    """``n`` animals of the cohort, deterministically from ``seed`` (see the module docstring)."""
    if isinstance(n, bool) or not isinstance(n, int) or n < 1:
        raise BadArgument("animals", "a whole number >= 1", n)
    names = mix_presets([(g.name, g.fraction) for g in population.groups], n)
    by_name = {g.name: g for g in population.groups}
    out = []
    for i, gname in enumerate(names):
        g = by_name[gname]
        rng = np.random.default_rng([int(seed), i])
        params = {k: _draw(v, rng, k) for k, v in g.params.items()}
        animal_seed = int(rng.integers(0, 2**31 - 1))
        out.append(AnimalDraw(f"a{i + 1:03d}", g.name, g.preset, params, animal_seed))
    return out


def _draw(value, rng: np.random.Generator, key: str):
    if not isinstance(value, dict):
        return value
    d = value
    lo, hi = _support(d)
    for _ in range(_TRIES):
        if d["dist"] == "fixed":
            x = d["value"]
        elif d["dist"] == "uniform":
            x = rng.uniform(d["lo"], d["hi"])
        elif d["dist"] == "lognormal":
            x = d["median"] * math.exp(d["sigma"] * rng.standard_normal())
        else:
            x = d["mean"] + d["sd"] * rng.standard_normal()
        if lo <= x <= hi:
            return float(x)
    raise BadArgument(key, "a distribution whose lo and hi keep some probability", d)

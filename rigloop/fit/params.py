"""The fitted parameters: their default bounds, scales and starts, and the checks on the
pins, bounds and starts a caller gives.

Each parameter is searched on a unit box (``search.py``): linearly for rates,
probabilities and θ; on a log scale for variances and β. ``PARAMETERS`` lists the default
bounds.

Identifiability, pinned by default (``default_fixed``): the Kalman learners' mean
depends on diffusion/noise and prior_var/noise only, so behaviour cannot tell all three
apart; ``noise`` is pinned (at 1.0, or the rule file's value in ``fit_from_store``).
With one-row-per-trial ("identity") features, TD's ``gamma`` and ``lam`` and Kalman
TD's ``gamma`` have no effect (the next row is the terminal zero row) and are pinned too.
The choice link pins the history kernel's ``decay`` at 0.7: with persev near 0 it has no
effect on the choices. A bound or start given for a default pin frees it (``fit_subject``).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..core.features import Representation
from ..core.learners import LEARNERS
from ..errors import BadArgument

OBSERVATION_PARAMS = ("beta", "theta", "lapse")  # the go/no-go link's (``respond``)
CHOICE_PARAMS = ("beta", "bias", "lapse", "persev", "decay")  # the two-choice link's
LINK_PARAMS = {"respond": OBSERVATION_PARAMS, "choice": CHOICE_PARAMS}
LINKS = tuple(LINK_PARAMS)
LINK_PARAMETER_NAMES = frozenset(OBSERVATION_PARAMS + CHOICE_PARAMS)


@dataclass(frozen=True, slots=True)
class ParamSpec:
    """One fitted parameter: default search bounds, scale, start, and its hard domain."""

    name: str
    lo: float
    hi: float
    log: bool
    default: float
    domain: tuple[float, float]  # values any bound or pin must respect


PARAMETERS: dict[str, ParamSpec] = {p.name: p for p in (
    ParamSpec("alpha", 0.0, 1.0, False, 0.2, (0.0, math.inf)),
    ParamSpec("gamma", 0.0, 1.0, False, 0.9, (0.0, 1.0)),
    ParamSpec("lam", 0.0, 1.0, False, 0.5, (0.0, 1.0)),
    ParamSpec("diffusion", 1e-6, 1.0, True, 0.01, (0.0, math.inf)),
    ParamSpec("noise", 1e-3, 10.0, True, 1.0, (0.0, math.inf)),
    ParamSpec("prior_var", 1e-3, 10.0, True, 1.0, (0.0, math.inf)),
    ParamSpec("beta", 0.1, 100.0, True, 5.0, (0.0, math.inf)),
    ParamSpec("theta", -3.0, 3.0, False, 0.3, (-math.inf, math.inf)),
    ParamSpec("lapse", 0.0, 0.5, False, 0.05, (0.0, 1.0)),
    ParamSpec("bias", -5.0, 5.0, False, 0.0, (-math.inf, math.inf)),
    ParamSpec("persev", -5.0, 5.0, False, 0.0, (-math.inf, math.inf)),
    ParamSpec("decay", 0.0, 0.99, False, 0.7, (0.0, 0.999)),
)}
DEFAULT_DECAY = 0.7  # the choice-history kernel's decay when it is pinned (core.responses default)


def model_parameters(learner_name: str, link: str = "respond") -> tuple[str, ...]:
    """Every parameter of the fitted model: the learner's, then the link's
    (``respond``: β, θ, lapse; ``choice``: β, bias, lapse, persev, decay)."""
    # the cue-value learners (two_step reads multi-step trials; `rigloop two-step` fits those)
    fitted = {name: cls for name, cls in LEARNERS.items() if name != "two_step"}
    cls = fitted.get(learner_name) if isinstance(learner_name, str) else None
    if cls is None:
        raise BadArgument("learner", f"one of {', '.join(map(repr, fitted))}", learner_name)
    return (*cls._param_names, *link_parameters(link))


def link_parameters(link: str) -> tuple[str, ...]:
    """The parameters of a response link (``LINKS``)."""
    if link not in LINK_PARAMS:
        raise BadArgument("link", f"one of {', '.join(map(repr, LINKS))}", link)
    return LINK_PARAMS[link]


def default_fixed(learner_name: str, representation: Representation,
                  link: str = "respond") -> dict[str, float]:
    """The parameters pinned when ``fixed`` is None (see the module docstring); the
    choice link pins the history kernel's ``decay`` (its persev weight stays free)."""
    model_parameters(learner_name, link)  # an unknown learner or link: a clear error
    out: dict[str, float] = {}
    if link == "choice":
        out["decay"] = DEFAULT_DECAY
    if LEARNERS[learner_name].bayesian:
        out["noise"] = 1.0
    if not representation.timed:
        if learner_name == "td":
            out.update(gamma=0.9, lam=0.0)
        elif learner_name == "kalman_td":
            out["gamma"] = 0.9
    return out


# --------------------------------------------------------------------------- checks


def pinned_parameters(learner_name: str, representation: Representation,
                      fixed: Mapping[str, Any] | None, link: str = "respond") -> dict[str, Any]:
    """The pins of a fit: ``fixed`` (None: ``default_fixed``), each number in its domain.

    A list, tuple or array pin (a per-cue rate) is kept as it came.
    """
    names = model_parameters(learner_name, link)
    pinned = dict(default_fixed(learner_name, representation, link) if fixed is None else fixed)
    check_names("fixed", pinned, names)
    for name, value in pinned.items():
        if not isinstance(value, (list, tuple, np.ndarray)):
            pinned[name] = in_domain(name, value, f"fixed[{name}]")
    return pinned


def free_parameters(names: Sequence[str], pinned: Mapping[str, Any]) -> tuple[str, ...]:
    """The parameters of ``names`` left to fit; at least one must be."""
    free = tuple(n for n in names if n not in pinned)
    if not free:
        raise BadArgument("fixed", "a mapping that leaves at least one parameter free",
                          sorted(pinned))
    return free


def check_names(what: str, given: Mapping[str, Any], allowed: Sequence[str]) -> None:
    """Refuse keys of ``given`` (the argument ``what``) that are not in ``allowed``."""
    unknown = sorted(set(given) - set(allowed))
    if unknown:
        raise BadArgument(what, f"a mapping of parameter names from {', '.join(allowed)}", unknown)


def in_domain(name: str, value: Any, shown: str | None = None) -> float:
    """``value`` as a float inside the parameter's hard domain (errors name ``shown``)."""
    spec = PARAMETERS[name]
    lo, hi = spec.domain
    ok = isinstance(value, (int, float, np.integer, np.floating)) and not isinstance(value, bool)
    if not ok or not math.isfinite(float(value)) or not lo <= float(value) <= hi:
        raise BadArgument(shown or name, f"a finite number in [{lo:g}, {hi:g}]", value)
    return float(value)


def search_bounds(free: Sequence[str], given: Mapping[str, Any], names: Sequence[str]) -> dict:
    """(low, high) per free parameter: ``given`` where named (checked), else the default."""
    check_names("bounds", given, names)
    out = {}
    for name in free:
        spec = PARAMETERS[name]
        if name not in given:
            out[name] = (spec.lo, spec.hi)
            continue
        pair = given[name]
        where = f"bounds[{name}]"
        lo_d, hi_d = spec.domain
        floor = "0 < low" if spec.log else f"{lo_d:g} <= low"
        ceiling = f" <= {hi_d:g}" if math.isfinite(hi_d) else ""
        expected = f"a pair (low, high) of finite numbers with {floor} < high{ceiling}"
        if spec.log:
            expected += (f" ({name} is searched on a log scale; to fit it at 0 pin it with "
                         f"fixed={{'{name}': 0.0}})")
        try:
            lo, hi = (float(v) for v in pair)
        except (TypeError, ValueError):
            raise BadArgument(where, expected, pair) from None
        valid = (math.isfinite(lo) and math.isfinite(hi) and lo < hi and lo >= lo_d and hi <= hi_d
                 and (lo > 0 or not spec.log))
        if not valid:
            raise BadArgument(where, expected, pair)
        out[name] = (lo, hi)
    return out


def _start_value(name: str, start: Mapping[str, float] | None, bounds: Mapping) -> float:
    """One parameter's first start: the caller's (within its bounds) or its clipped default."""
    lo, hi = bounds[name]
    if start and name in start:
        value = in_domain(name, start[name], f"start[{name}]")
        if not lo <= value <= hi:
            raise BadArgument(f"start[{name}]", f"a value within its bounds [{lo:g}, {hi:g}]",
                              value)
        return value
    return min(max(PARAMETERS[name].default, lo), hi)


def start_values(free: Sequence[str], start: Mapping[str, float] | None,
                 bounds: Mapping[str, tuple[float, float]]) -> np.ndarray:
    """The first start: ``start`` where given (names and values checked), else the
    parameters' defaults, each clipped into its bounds."""
    if start:
        check_names("start", start, free)
    return np.array([_start_value(n, start, bounds) for n in free])

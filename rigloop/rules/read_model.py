"""Read a rule file's model sections: [learner], [features], [performance], [behaviour],
[outcomes] and [response_model], each into its spec with every problem recorded.

These say how rigloop models the animal (the learner and its parameters, the feature
representation, the learning curve, the per-cue behaviour estimate, the value of
punishments, the response model); the schedule is read in ``read_stages``.
"""

from __future__ import annotations

from typing import Any

from .model import (
    FEATURE_KINDS,
    LEARNERS,
    REWARD_LEARNERS,
    VALUE_KINDS,
    BehaviourSpec,
    FeatureSpec,
    LearnerSpec,
    OutcomeValues,
    PerformanceSpec,
    ResponseSpec,
)
from .reader import Reader

# learner -> {param: (default, lo, hi, lo_open)}
LEARNER_PARAMS: dict[str, dict[str, tuple[float, float, float, bool]]] = {
    "rescorla_wagner": {"alpha": (0.1, 0.0, 1.0, True)},
    "kalman_filter": {
        "diffusion": (0.01, 0.0, 10.0, False),
        "noise": (1.0, 0.0, 100.0, True),
        "prior_var": (1.0, 0.0, 100.0, True),
    },
    "td": {"alpha": (0.1, 0.0, 1.0, True), "gamma": (0.95, 0.0, 1.0, False), "lam": (0.0, 0.0, 1.0, False)},
    "kalman_td": {
        "gamma": (0.95, 0.0, 1.0, False),
        "diffusion": (0.01, 0.0, 10.0, False),
        "noise": (1.0, 0.0, 100.0, True),
        "prior_var": (1.0, 0.0, 100.0, True),
    },
    # the hybrid of multi-step trials (core/learners/two_step.py; Daw et al. 2011 names)
    "two_step": {"alpha1": (0.5, 0.0, 1.0, True), "alpha2": (0.5, 0.0, 1.0, True), "lam": (0.6, 0.0, 1.0, False)},
}


def read_learner(r: Reader, data: dict) -> LearnerSpec:
    """[learner]: the model, what it values (cues or cue:action) and its parameters in range."""
    t = r.table(data, "learner", "learner", required=True) or {}
    model = r.text(t, "model", "learner.model", choices=LEARNERS, required=True) or "rescorla_wagner"
    table = LEARNER_PARAMS[model]
    r.keys(t, ["model", "values", *table], "learner")
    values = r.text(t, "values", "learner.values", "cue", choices=VALUE_KINDS) or "cue"
    params: dict[str, Any] = {}
    for key, (default, lo, hi, lo_open) in table.items():
        path = f"learner.{key}"
        v = t.get(key, default)
        if key == "alpha" and isinstance(v, list):
            items = [r.num({key: x}, key, f"{path}[{i}]", default, lo=lo, hi=hi, lo_open=lo_open)
                     for i, x in enumerate(v)]
            params[key] = [float(x) for x in items]
        else:
            params[key] = r.num({key: v}, key, path, default, lo=lo, hi=hi, lo_open=lo_open)
    return LearnerSpec(model, params, values)


def read_features(r: Reader, data: dict, learner: LearnerSpec) -> FeatureSpec:
    """[features]: the representation, which must suit the learner (timed for TD, identity for trial learners)."""
    t = r.table(data, "features", "features")
    if t is None:
        t = {"kind": "identity" if learner.name in REWARD_LEARNERS else "serial_compound"}
        if learner.name not in REWARD_LEARNERS:
            r.add("features", f"is missing: learner '{learner.name}' needs timed features "
                              "(kind = presence, serial_compound or trace)")
    kind = r.text(t, "kind", "features.kind", choices=FEATURE_KINDS, required=True) or "identity"
    allowed = {"identity": ["kind"], "presence": ["kind", "dt"], "serial_compound": ["kind", "dt", "n_bins"],
               "trace": ["kind", "dt", "n_bins", "decay"]}[kind]
    r.keys(t, allowed, "features")
    dt = r.num(t, "dt", "features.dt", 0.25, lo=0.001, hi=5.0)
    n_bins = r.num(t, "n_bins", "features.n_bins", None, lo=1, hi=256, integer=True,
                   required=kind == "serial_compound")
    decay = r.num(t, "decay", "features.decay", None, lo=0, hi=1, lo_open=True, hi_open=True,
                  required=kind == "trace")
    if kind == "identity" and learner.name not in REWARD_LEARNERS:
        r.add("features.kind", f"'identity' features give one row per trial; learner '{learner.name}' "
                               "learns over time steps and needs presence, serial_compound or trace")
    if kind != "identity" and learner.name in REWARD_LEARNERS:
        r.add("features.kind", f"'{kind}' features are timed; learner '{learner.name}' learns one reward per "
                               "trial and needs kind = \"identity\"")
    return FeatureSpec(kind, dt, n_bins, decay)


def read_performance(r: Reader, data: dict) -> PerformanceSpec:
    """[performance]: chance level and the learning curve's variance per trial."""
    perf_t = r.table(data, "performance", "performance") or {}
    r.keys(perf_t, ["chance", "sigma2"], "performance")
    return PerformanceSpec(
        chance=r.num(perf_t, "chance", "performance.chance", 0.5, lo=0, hi=1, lo_open=True, hi_open=True),
        sigma2=r.num(perf_t, "sigma2", "performance.sigma2", 0.05, lo=0, lo_open=True, hi=10),
    )


def read_behaviour(r: Reader, data: dict) -> BehaviourSpec:
    """[behaviour]: the per-cue estimate's forgetting and prior variance."""
    t = r.table(data, "behaviour", "behaviour") or {}
    r.keys(t, ["sigma2", "prior_var"], "behaviour")
    d = BehaviourSpec()
    return BehaviourSpec(
        sigma2=float(r.num(t, "sigma2", "behaviour.sigma2", d.sigma2, lo=0, lo_open=True, hi=5)),
        prior_var=float(r.num(t, "prior_var", "behaviour.prior_var", d.prior_var, lo=0, lo_open=True, hi=25)),
    )


def read_outcomes(r: Reader, data: dict) -> OutcomeValues:
    """[outcomes]: the value of each punishment to the learner, in reward units (<= 0)."""
    t = r.table(data, "outcomes", "outcomes") or {}
    names = ["timeout", "airpuff", "noise"]
    r.keys(t, names, "outcomes")
    d = OutcomeValues()
    vals = {k: float(r.num(t, k, f"outcomes.{k}", getattr(d, k), lo=-10, hi=0)) for k in names}
    return OutcomeValues(**vals)


def read_response_model(r: Reader, data: dict) -> ResponseSpec:
    """[response_model]: how learner values become a response probability; unset ones keep their defaults."""
    t = r.table(data, "response_model", "response_model") or {}
    r.keys(t, ["beta", "theta", "lapse", "bias", "persev", "decay"], "response_model")
    d = ResponseSpec()

    def get(key: str, **bounds) -> float | None:
        v = r.num(t, key, f"response_model.{key}", getattr(d, key), **bounds)
        return None if v is None else float(v)

    return ResponseSpec(beta=get("beta", lo=0, hi=100), theta=get("theta", lo=-10, hi=10),
                        lapse=get("lapse", lo=0, hi=1, hi_open=True), bias=get("bias", lo=-10, hi=10),
                        persev=get("persev", lo=-10, hi=10), decay=get("decay", lo=0, hi=1, hi_open=True))

"""Several candidate learners fitted to the same trials and ranked by AIC, and fits of a
subject's stored sessions with the models their rule files name.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass, replace
from typing import Any

from ..core.features import Representation
from ..core.learners import LEARNERS
from ..errors import BadArgument
from .data import FitData, chose, link_for, prepare, responded
from .params import PARAMETERS, default_fixed, model_parameters
from .results import FitResult
from .search import fit_subject


@dataclass(frozen=True, slots=True)
class ModelSpec:
    """A candidate model for ``compare_learners``: a learner on a representation, with
    its pins, starts and bounds, and the response link (None: from the trials)."""

    learner: str
    representation: Representation
    reward_unit_ul: float
    fixed: Mapping[str, Any] | None = None
    start: Mapping[str, float] | None = None
    bounds: Mapping[str, tuple[float, float]] | None = None
    link: str | None = None

    def with_choices(self, fix: Mapping[str, Any] | None = None,
                     bounds: Mapping[str, tuple[float, float]] | None = None,
                     start: Mapping[str, float] | None = None) -> ModelSpec:
        """This spec with a caller's pins, bounds and starts laid over its own, each only
        where the name is a parameter of this model. A name given bounds or a start is
        freed from a default pin; a pinned name loses its start."""
        names = model_parameters(self.learner, self.link or "respond")
        fix = {k: v for k, v in (fix or {}).items() if k in names}
        bounds = {k: v for k, v in (bounds or {}).items() if k in names and k not in fix}
        start = {k: v for k, v in (start or {}).items() if k in names and k not in fix}
        fixed = {k: v for k, v in dict(self.fixed or default_fixed(
            self.learner, self.representation, self.link or "respond")).items()
            if k not in bounds and k not in start}
        fixed.update(fix)
        starts = {k: v for k, v in dict(self.start or {}).items() if k not in fixed}
        for k, v in list(starts.items()):
            lo, hi = bounds.get(k, (PARAMETERS[k].lo, PARAMETERS[k].hi))
            starts[k] = min(max(v, lo), hi)
        starts.update(start)
        merged = dict(self.bounds or {})
        merged.update(bounds)
        return ModelSpec(self.learner, self.representation, self.reward_unit_ul, fixed,
                         starts or None, merged or None, self.link)


def spec_from_rules(rules, learner: str | None = None, link: str | None = None) -> ModelSpec:
    """The rule file's learner (or ``learner``) on its representation, started at its
    parameters; Bayesian learners keep the file's ``noise`` (see ``fit/params.py``), and
    the choice link keeps the file's history decay.

    A learner of the other target than the file's gets the matching representation of
    the same cues (as the rule-file loader requires): a reward learner one row per trial
    (``identity``), a value learner ``presence`` rows at the file's ``dt``.
    """
    from ..core.features import CueList, make_representation
    from ..core.subject import representation_for

    rep = representation_for(rules)
    if rules.learner.values == "cue_action":
        # the fitted model links cue values to responding (go/no-go); a rule file's
        # action values (cue:action columns) are fitted as the cue values they pool
        f = rules.features
        rep = make_representation(f.kind, CueList(rules.cues), dt=f.dt, n_bins=f.n_bins, decay=f.decay)
    name = learner or rules.learner.name
    if name == "two_step":  # multi-step trials: fitted from (a1, s2, a2, reward), not cue rows
        raise BadArgument("learner", "a learner of cue values; sessions of the two_step learner are fitted by "
                                     "`rigloop fit --learner hybrid` (or model_free, model_based, successor; in "
                                     "Python rigloop.fit.two_step) from each trial's first action, second-stage "
                                     "state, second action and reward", name)
    model_parameters(name)  # unknown name: a clear error now
    reward_learner = LEARNERS[name].kind == "reward"
    if reward_learner and rep.timed:
        rep = make_representation("identity", rep.cues)
    elif not reward_learner and not rep.timed:
        rep = make_representation("presence", rep.cues, dt=rules.features.dt)
    fixed = default_fixed(name, rep, link or "respond")
    if "decay" in fixed:
        fixed["decay"] = float(rules.spec.response.decay)
    start: dict[str, float] = {}
    if name == rules.learner.name:
        for key, value in rules.learner.params.items():
            if key in fixed:
                fixed[key] = value
            elif isinstance(value, (int, float)) and not isinstance(value, bool):
                spec = PARAMETERS[key]
                start[key] = min(max(float(value), spec.lo), spec.hi)
    return ModelSpec(name, rep, rules.reward_unit_ul, fixed, start or None, None, link)


def compare_learners(
    events: Iterable,
    models: Sequence[Any],
    *,
    starts: int = 4,
    seed: int = 0,
    progress: Callable[[int, int], None] | None = None,
    crossval: bool = True,
    intervals: bool = True,
    bootstrap: int = 0,
    calibrate: int = 0,
) -> list[FitResult]:
    """Fit each candidate in ``models`` to the same trials; the results ranked by AIC.

    models: ``ModelSpec`` values, or loaded ``Rules`` (their learner and representation).
    Rows are computed once per distinct representation, reward unit and link. The
    likelihoods are of the same responses, so their AICs compare whatever the
    representations. With two or more sessions each result also carries the
    cross-validated log-likelihood of held-out sessions (``crossval``). calibrate: that
    many simulated data sets per model calibrate its profile intervals (``calibrate.py``);
    without it, a fit with few trials per free parameter is warned that its χ² intervals
    undercover (``calibrate.small_data_warning``).
    progress(done, total) counts starts over all the models (then each calibration's
    data sets).
    """
    specs = [m if isinstance(m, ModelSpec) else spec_from_rules(m) for m in models]
    if not specs:
        raise BadArgument("models", "at least one ModelSpec or Rules", list(models))
    events = list(events)
    prepared: dict[tuple, FitData] = {}
    results = []
    for i, spec in enumerate(specs):
        link = spec.link or link_for(events)
        key = (spec.representation, spec.reward_unit_ul, link)
        if key not in prepared:
            prepared[key] = prepare(events, spec.representation, reward_unit_ul=spec.reward_unit_ul,
                                    link=link)
        each = None
        if progress is not None:
            def each(done: int, total: int, i: int = i) -> None:
                progress(i * total + done, len(specs) * total)
        try:
            result = fit_subject(prepared[key], spec.learner, fixed=spec.fixed,
                                 start=spec.start, bounds=spec.bounds, starts=starts,
                                 seed=seed, progress=each, crossval=crossval,
                                 intervals=intervals, bootstrap=bootstrap)
            results.append(_with_calibration(result, events, prepared[key], intervals,
                                             calibrate, seed, progress))
        except BadArgument as err:
            hint = _other_link_hint(err, events, link)
            if hint is None:
                raise
            raise BadArgument(err.argument, err.expected + hint, err.value) from None
    return sorted(results, key=lambda r: r.aic)


def _with_calibration(result: FitResult, events: Sequence, data: FitData, intervals: bool,
                      calibrate: int, seed: int, progress) -> FitResult:
    """``result`` with calibrated intervals (``calibrate`` data sets), or with the warning
    that its χ² intervals undercover at this many trials per free parameter."""
    from .calibrate import calibrated_fit, small_data_warning

    if not intervals:
        return result
    if calibrate:
        return calibrated_fit(events, result, calibrate, seed=seed, data=data, progress=progress)
    warning = small_data_warning(result.n_trials, result.k, result.link)
    if warning is None:
        return result
    return replace(result, warnings=(*result.warnings, warning))


def _other_link_hint(err: BadArgument, events: Sequence, link: str) -> str | None:
    """When too few trials are usable under ``link`` but the other link reads them: the
    words that say which link to try (None otherwise)."""
    if err.argument != "events":
        return None
    if link == "respond" and any(chose(e) is not None for e in events):
        return ("; these trials record two-choice responses (a side): try --link choice "
                "(link='choice' in Python)")
    if link == "choice" and any(responded(e) is not None for e in events):
        return ("; these trials record go/no-go responses (counts): try --link respond "
                "(link='respond' in Python)")
    return None


def fit_from_store(
    store,
    subject: str,
    learner: str | Sequence[str] | None = None,
    session: str | None = None,
    *,
    starts: int = 4,
    seed: int = 0,
    progress: Callable[[int, int], None] | None = None,
    link: str | None = None,
    fix: Mapping[str, Any] | None = None,
    bounds: Mapping[str, tuple[float, float]] | None = None,
    start: Mapping[str, float] | None = None,
    bootstrap: int = 0,
    crossval: bool = True,
    intervals: bool = True,
    calibrate: int = 0,
    option_names: Sequence[str] = ("fix", "bounds", "start"),
) -> FitResult | list[FitResult]:
    """Fit a subject's stored trials (every session, or only ``session``).

    The representation, reward unit and default learner come from the rule file of the
    sessions (they must agree on representation and reward unit). One learner name (or
    None: the rule file's) gives a FitResult; a sequence of names gives the results
    ranked by AIC. The learner starts naive and carries across the sessions in order.
    link: None picks it from the trials' response kinds. fix, bounds, start: the caller's
    pins, search bounds and starts, applied to each learner that has the parameter
    (``ModelSpec.with_choices``). crossval: the held-out-session log-likelihood (two
    sessions or more). calibrate: simulated data sets per learner for calibrated
    intervals (``compare_learners``). A name in fix, bounds or start that no fitted model has is refused
    with the valid ones (``option_names``: what the three are called in the message).
    """
    infos = stored_sessions(store, subject, session)
    rules = _session_rules(infos)
    events = [e for info in infos for e in store.trials(subject, info.session)]
    link = link or link_for(events)
    names = [learner] if learner is None or isinstance(learner, str) else list(learner)
    plain = [spec_from_rules(rules[-1], name, link) for name in names]
    _check_parameter_names(plain, link, option_names, fix, bounds, start)
    specs = [spec.with_choices(fix, bounds, start) for spec in plain]
    ranked = compare_learners(events, specs, starts=starts, seed=seed, progress=progress,
                              crossval=crossval, intervals=intervals, bootstrap=bootstrap,
                              calibrate=calibrate)
    return ranked[0] if learner is None or isinstance(learner, str) else ranked


def _check_parameter_names(specs: Sequence[ModelSpec], link: str, option_names: Sequence[str],
                           *given: Mapping[str, Any] | None) -> None:
    """Each name given must be a parameter of at least one of the fitted models."""
    from ..core.names import check_name

    valid: dict[str, None] = {}
    for spec in specs:
        valid.update(dict.fromkeys(model_parameters(spec.learner, link)))
    learners = ", ".join(dict.fromkeys(s.learner for s in specs))
    for option, mapping in zip(option_names, given, strict=True):
        for name in mapping or {}:
            check_name(option, f"a parameter of {learners} with the {link} link", name, valid)


def stored_sessions(store, subject: str, session: str | None = None, *,
                    options: tuple[str, str] = ("subject", "session")) -> list:
    """The subject's stored sessions in order (only ``session`` when one is named); an
    unknown subject or session is refused under ``options`` (the caller's argument names)."""
    infos = store.sessions(subject)
    if not infos:
        known = ", ".join(store.subjects()) or "none"
        raise BadArgument(options[0], f"a subject with stored sessions (subjects: {known})", subject)
    if session is not None:
        names = [i.session for i in infos]
        if session not in names:
            raise BadArgument(options[1], f"one of {subject}'s sessions ({', '.join(names)})", session)
        infos = [i for i in infos if i.session == session]
    return infos


def _session_rules(infos: Sequence) -> list:
    """The loaded rule file of each session; they must share features and reward unit."""
    from ..core.subject import representation_for
    from ..replay import RulesCache

    cache = RulesCache()
    rules = [cache.get(i.rules_text, i.rules_sha256,
                       f"session {i.session} rule file {i.rules_name}") for i in infos]
    first_rep, unit = representation_for(rules[0]), rules[0].reward_unit_ul
    for info, r in zip(infos, rules, strict=True):
        if representation_for(r) != first_rep or r.reward_unit_ul != unit:
            raise BadArgument(
                "session", f"a session whose rule file has the features and reward unit of "
                f"session {infos[0].session!r} (fit the sessions separately with --session)",
                info.session)
    return rules

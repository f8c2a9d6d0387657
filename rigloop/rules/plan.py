"""A rule file's plan in plain words: what ``rigloop check`` prints."""

from __future__ import annotations

from ..core.performance import sequential_summary
from .expr import fmt
from .model import Block, NextCue, Spec, Sprt

_LEARNER_NAMES = {
    "rescorla_wagner": "Rescorla-Wagner",
    "kalman_filter": "Kalman filter",
    "td": "TD(lambda)",
    "kalman_td": "Kalman TD",
    "two_step": "two-step hybrid, model-based weight w with a posterior from the animal's own choices",
}
_PARAM_NAMES = {"prior_var": "prior variance", "lam": "lambda"}
_FEATURES = {
    "identity": "one feature per cue, one step per trial",
    "presence": "one feature per cue while it is on",
    "serial_compound": "serial-compound features (one per cue and time step since onset)",
    "trace": "decaying cue traces",
}


def describe(rules, profile=None) -> str:
    """Stages, blocks, criteria, session ends and limits, one line per fact."""
    s: Spec = rules.spec
    out: list[str] = []
    add = out.append
    add(f"rule file '{s.name}' ({rules.source}, sha256 {rules.sha256[:12]})")
    if s.description:
        add(f"  {s.description}")
    params = ", ".join(f"{_PARAM_NAMES.get(k, k)} {_val(v)}" for k, v in s.learner.params.items())
    add(f"learner: {_LEARNER_NAMES[s.learner.name]} ({params})")
    f = s.features
    feat = _FEATURES[f.kind]
    if f.kind != "identity":
        feat += f", {fmt(f.dt)} s steps"
    if f.n_bins is not None:
        feat += f", {f.n_bins} bins"
    if f.decay is not None:
        feat += f", decay {fmt(f.decay)} per step"
    add(f"features: {feat}")
    add(f"reward unit: {fmt(s.reward_unit_ul)} µL counts as reward 1.0")
    add(f"performance: learning curve per cue and overall, chance {fmt(s.performance.chance)}, "
        f"random-walk variance {fmt(s.performance.sigma2)}")
    add(f"behaviour: the animal's own P(respond | cue) (P(right | cue) for two-choice cues) per cue, "
        f"from its responses, forgetting {fmt(s.behaviour.sigma2)} per trial of the cue (logit random-walk "
        f"variance), prior variance {fmt(s.behaviour.prior_var)}")
    o = s.outcomes
    add(f"outcomes: rewards in reward units; timeout {fmt(o.timeout)}, air puff {fmt(o.airpuff)}, "
        f"noise {fmt(o.noise)} reach the learner as negative outcomes")
    if s.learner.values == "cue_action":
        add("learner values: one per (cue, action): respond/withhold on go/no-go cues, left/right on "
            "two-choice cues, learned from what the animal did and what it got")
    add("cues: " + ", ".join(f"{c.name} ({c.role}{', ' + c.label if c.label else ''})" for c in s.cues.values()))
    add("")
    for i, st in enumerate(s.stages.values(), 1):
        first = " (first)" if st.name == s.first_stage else ""
        add(f"stage {i} '{st.name}'{first}: starts in block '{st.first_block}'"
            + ("; each new session restarts that block" if st.new_session == "first_block" else ""))
        for b in st.blocks.values():
            _block(add, b)
        if st.advance is not None:
            add(f"  advances to stage '{st.advance.to}' when {st.advance.when.text}")
        if st.step_back is not None:
            add(f"  steps back to stage '{st.step_back.to}' when {st.step_back.when.text}")
        if st.advance is None and st.step_back is None:
            add("  stays until the session ends (last stage)")
        add("")
    add("session ends when any holds:")
    for e in s.session_end:
        add(f"  {e.name}: {e.when.text}")
    if not s.session_end:
        add("  (no criteria of its own; the welfare session cap applies)")
    add("")
    w = s.welfare
    add("welfare limits (rigloop's; the lab's animal-care protocol and veterinary staff govern):")
    add(f"  reward probability of a rewarded cue never below {fmt(w.min_reward_prob)}")
    add(f"  after {w.max_unrewarded_run} unrewarded trials in a row the next trial offers a rewarded cue, armed")
    add(f"  session ends at {fmt(w.max_session_min)} minutes")
    add(f"  daily minimum {fmt(w.daily_min_ml)} mL: warns after {fmt(w.warn_after_min)} min when the session is "
        f"on track to fall short over {fmt(w.planned_min)} planned minutes")
    add(f"  no single reward above {fmt(w.max_reward_ul)} µL")
    day = f"starts at {w.day_starts} {w.timezone}"
    if w.timezone == "UTC" and w.day_starts == "00:00":
        day += " (the default: set [welfare] timezone and day_starts to your lab's day)"
    add(f"  'water today' adds up over a day that {day}")
    if w.relax:
        add(f"  loosened on purpose: {', '.join(w.relax)}")
    from .lint import glossary, warnings

    words = glossary(s)
    if words:
        add("")
        add("what the criteria read:")
        for line in words:
            add(f"  {line}")
    cautions = warnings(s)
    if cautions:
        add("")
        add("warnings:")
        for line in cautions:
            add(f"  - {line}")
    if profile is not None:
        add("")
        lo, hi = profile.ul_range
        add(f"rig profile '{profile.name}' ({profile.kind}): cues {', '.join(profile.cues)}; "
            f"responses {', '.join(profile.responses)}; serial {profile.serial.port} at {profile.serial.baud} baud")
        add(f"  valve: ul = {fmt(profile.intercept)} + {fmt(profile.slope)} * ms, calibrated {fmt(lo)} to {fmt(hi)} µL")
        vols = sorted({k.ul for st in s.stages.values() for b in st.blocks.values()
                       for k in b.contingency.values() if k.ul > 0 and lo <= k.ul <= hi})
        for v in vols:
            add(f"  {fmt(v)} µL -> valve open {fmt(profile.valve_ms(v))} ms")
    return "\n".join(out).rstrip() + "\n"


def _val(v) -> str:
    return "[" + ", ".join(fmt(x) for x in v) + "]" if isinstance(v, list) else fmt(v)


def _block(add, b: Block) -> None:
    add(f"  block '{b.name}':")
    add("    cues: " + "; ".join(
        f"{c} p = {fmt(k.p)}, {fmt(k.ul)} µL" if k.rewarded else f"{c} unrewarded" for c, k in b.contingency.items()))
    add(f"    next cue: {_next_cue(b.next_cue)}")
    if b.reward.kind == "fixed":
        add("    reward probability: as the block's cues say")
    else:
        add(f"    reward probability: thinned from the block's p toward {fmt(b.reward.floor)} as "
            f"{b.reward.certainty.text} rises to 1")
    if b.staircase is not None:
        st = b.staircase
        add(f"    staircase on {st.parameter}: starts at {fmt(st.start)} in [{fmt(st.lo)}, {fmt(st.hi)}], "
            f"{st.down} correct in a row -> {fmt(st.step_harder)} harder ({st.harder} is harder), "
            f"{st.up} error{'s' if st.up > 1 else ''} -> {fmt(st.step_easier)} easier; "
            f"targets about {fmt(100 * st.target())}% correct with equal steps and 1 up (Levitt 1971)")
    if b.sprt is not None:
        _sequential(add, b.sprt)
    e = b.end
    if e is None:
        add("    does not end by itself")
        return
    parts = []
    if e.when is not None:
        parts.append(f"when {e.when.text}")
    if e.max_trials is not None:
        parts.append(f"at {e.max_trials} trials at the latest")
    floor = f" (not before {e.min_trials} trials)" if e.min_trials else ""
    add(f"    ends {'; or '.join(parts)}{floor}, then block '{e.then}'")


def _sequential(add, t: Sprt) -> None:
    """The block's sequential criterion: the test, its threshold, its guarantee, how soon
    it passes an animal at p1; for Wald's, a warning that restarts spend alpha again."""
    sm = sequential_summary(t.test, t.p0, t.p1, t.alpha, t.beta, t.horizon)
    h = fmt(sm["threshold"])
    if t.test == "cusum":
        how = (f"S = max(0, S + the trial's log likelihood ratio) reaches h = ln(horizon {t.horizon} / "
               f"alpha {fmt(t.alpha)}) = {h}")
    elif t.test == "power_one":
        how = f"the log likelihood ratio (no lower boundary) reaches ln(1 / alpha {fmt(t.alpha)}) = {h}"
    else:
        how = (f"the log likelihood ratio reaches ln A = {h} (alpha {fmt(t.alpha)}, beta {fmt(t.beta)}); "
               f"at ln B = {fmt(sm['restart_at'])} it accepts p0 (sprt_reject, until the next trial it "
               "counts) and starts again from 0")
    source = {"cusum": "Page 1954", "power_one": "Robbins 1970", "wald": "Wald 1945"}[t.test]
    add(f"    sequential criterion on {t.cond} ({sm['name']}; {source}): p0 {fmt(t.p0)} vs p1 {fmt(t.p1)}; "
        f"sprt_accept once {how}; a pass stays until the block changes")
    add(f"      guarantee: {sm['guarantee']}")
    add(f"      expect about {sm['trials_to_pass_p1']:.0f} trials to pass once the animal performs at p1 "
        "(approximate)" + (", more after a long poor stretch" if t.test == "power_one" else ""))
    if t.test == "wald":
        add("      warning: Wald's SPRT spends alpha again at every restart, so it bounds nothing over many "
            'restarts; test = "cusum" bounds false passes over a horizon of trials')


def _next_cue(n: NextCue) -> str:
    if n.kind == "sequence":
        return "fixed sequence " + ", ".join(n.sequence) + " (repeating)"
    if n.kind == "balanced":
        return f"balanced random in mini-blocks with each cue {n.repeats} time{'s' if n.repeats > 1 else ''}, " \
               f"at most {n.max_run} in a row"
    if n.kind == "weighted":
        return "weighted random (" + ", ".join(f"{c} {fmt(w)}" for c, w in n.weights) + ")"
    if n.kind == "uncertain":
        return "the cue whose value is most uncertain (largest posterior sd)"
    return (f"counter-bias: favour the side chosen less over about the last {n.window} choices "
            f"(each side between {fmt(1 - n.max_p)} and {fmt(n.max_p)})")

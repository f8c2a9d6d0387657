"""Demo part 5: the two-stage task. Two simulated mice of the invented Brackenfield room,
one that plans through the transitions and one that repeats what paid, run one session
each of the shipped ``two_step`` rule file through ``begin_session`` / ``step``. The
demo prints where each stands on the criterion P(w > 0.5) >= 0.95 (read from its own
first-stage choices), the stay-probability regression, and draws the stay figure.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..core.two_step import stay_regression, stay_table
from ..offline.simulate import preset_animal, simulate_session
from ..outputs.two_step_figure import stay_figure
from ..rules.load import load_example

TRIALS = 300
ANIMALS = (("mb_mouse", "model_based", 11), ("mf_mouse", "model_free", 12))


def choices(events) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(a1, reward, common) per trial with both steps: first choice right (1) or left (0),
    whether it paid, whether the state reached was the choice's common one."""
    rows = [e for e in events if len(e.steps) >= 2]
    states = {"port_a_light": 0, "port_b_light": 1}
    a1 = np.array([1 if e.steps[0].action == "right" else 0 for e in rows])
    s2 = np.array([states.get(e.steps[1].state, -1) for e in rows])
    reward = np.array([e.outcome.reward_ul > 0 for e in rows])
    return a1, reward, a1 == s2


def run(data: Path) -> int:
    rules = load_example("two_step")
    print("rule file 'two_step': stage 'two_stage_training' advances when p_model_based(0.5) >= 0.95 "
          "and trials_in_stage >= 200")
    status = 0
    for subject, kind, seed in ANIMALS:
        run_ = simulate_session(rules, preset_animal(kind, rules, subject, seed), session="d1", max_trials=TRIALS)
        post = run_.state.learner.posterior
        moved = next((i + 1 for i, d in enumerate(run_.decisions) if d.stage == "planning"), None)
        lo, hi = post.interval(0.95)
        print(f"{subject} (simulated {kind.replace('_', '-')}): {len(run_.events)} trials, "
              f"at the end P(w > 0.5) = {post.p_above(0.5):.3f}, w about {post.mean:.2f} (95% {lo:.2f}-{hi:.2f}); "
              + (f"moved to 'planning' after trial {moved}" if moved else "stays in 'two_stage_training'"))
        a1, reward, common = choices(run_.events)
        reg = stay_regression(a1, reward, common)
        for term in ("reward", "transition", "reward_x_transition"):
            t = reg.term(term)
            print(f"    stay ~ {term:<20} {t['coef']:+.2f} (se {t['se']:.2f}, p {t['p_value']:.2g})")
        out = data / f"two_step_stay_{subject}.png"
        stay_figure(stay_table(a1, reward, common), str(out),
                    title=f"{subject}: simulated {kind.replace('_', '-')} mouse, {len(a1)} trials")
        print(f"    figure: {out}")
        expected = kind == "model_based"
        if (moved is not None) != expected:
            print(f"    UNEXPECTED: the {kind} mouse {'did not pass' if expected else 'passed'} the criterion")
            status = 1
    print("A mouse that repeats what paid stays after a reward however it got there (a reward main")
    print("effect); one that plans repeats after a reward through a common transition and switches after one")
    print("through a rare one (the reward x transition interaction). Only the second passes the stage criterion.")
    return status


"""Part 3 of the demo: fitted models checked against the animal, and a psychometric fit.

Invented scenario: one simulated mouse on the go/no-go shaping file and one simulated
rat on the two-choice contrast staircase, stored in the demo's data directory. The
mouse is fitted (Rescorla–Wagner, go/no-go link) and the fit run 100 times on its own
trials (``rigloop predictive``); the rat's staircase trials get a Weibull psychometric
fit (``rigloop psychometric``). Both figures are written beside the store.
"""

from __future__ import annotations

import math
from pathlib import Path


def run(data: Path) -> int:
    from ..fit import fit_from_store
    from ..fit.psychometric import binned, fit_psychometric
    from ..fit.psychometric_data import graded_trials, staircase_comparison
    from ..offline.fitted_animals import models_from_fit_json
    from ..offline.predictive import ran_under, run_check
    from ..offline.simulate import preset_animal, record_session
    from ..outputs.predictive_figure import draw_predictive
    from ..outputs.psychometric_figure import draw_psychometric
    from ..rules.load import load_example
    from ..store import Store

    db = data / "fit_demo.sqlite"
    if db.exists():
        db.unlink()
    gonogo, stair = load_example("gonogo_shaping"), load_example("two_choice_staircase")
    with Store(db) as store:
        state = None
        mouse = preset_animal("typical", gonogo, "mouse07", seed=7)
        for k in range(2):
            state = record_session(store, gonogo, mouse, session=f"day{k + 1}", state=state, max_trials=200).state
        rat = preset_animal("fast_learner", stair, "rat03", seed=3)
        record_session(store, stair, rat, session="day1", max_trials=450)

        fit = fit_from_store(store, "mouse07", learner="rescorla_wagner")
        pairs = ran_under(store, "mouse07", store.sessions("mouse07"))
        graded = graded_trials(store, "rat03")
    model = models_from_fit_json({"subject": "mouse07", "fits": [fit.to_dict()]}, gonogo)[0]
    params = ", ".join(f"{k} {v:.3g}" for k, v in {**model.learner_params, **model.link_params}.items())
    print(f"mouse07 (go/no-go, {len(pairs)} trials): rescorla_wagner fitted: {params}")
    check = run_check(pairs, model, runs=100, seed=0)
    for cue, c in check.curves.items():
        print(f"  {cue}: {c['outside'].mean():.1%} of its learning curve outside the model's 95% band")
    starts = [0] + [k for k in range(1, len(check.session)) if check.session[k] != check.session[k - 1]]
    pp = draw_predictive(str(data / "predictive_check.png"), curves=check.curves, session_starts=starts,
                         ylabel="P(respond)", stay=None,
                         title=f"mouse07: rescorla_wagner fitted, 100 runs on its own trials; "
                               f"{check.outside_fraction:.0%} outside the 95% band")
    print(f"  figure: {pp}   (the same as `rigloop predictive --db {db} --subject mouse07 "
          f"--learner rescorla_wagner --out FIG`)")

    psy = fit_psychometric(graded.x, graded.y, function="weibull", guess=graded.guess, band_runs=100)
    stair_cmp = staircase_comparison(graded, psy)
    ci = psy.ci95["threshold"]
    print(f"rat03 (two-choice contrast staircase, {psy.n_trials} trials at graded contrast): Weibull "
          f"threshold at 75% correct {psy.params['threshold']:.3g} [{ci[0]:.3g}, {ci[1]:.3g}], "
          f"lapse {psy.params['lapse']:.3g}")
    if stair_cmp and stair_cmp["level"] is not None:
        print(f"  the 1-up-2-down track converged at contrast {stair_cmp['level']:.3g}; Levitt's target "
              f"{stair_cmp['target']:.1%}, and the fitted curve gives {stair_cmp['p_fit_at_level']:.1%} there")
    grid, lower, upper = psy.band
    t = psy.params["threshold"]
    fig = draw_psychometric(str(data / "psychometric.png"), bins=binned(psy), grid=grid, curve=psy.predict(grid),
                            band=(lower, upper), level=psy.level, threshold=t if math.isfinite(t) else float("nan"),
                            threshold_ci=tuple(ci), guess=psy.params["guess"], xlabel="contrast",
                            ylabel="P(correct)", title=f"rat03: weibull fit, {psy.n_trials} trials",
                            staircase=stair_cmp)
    print(f"  figure: {fig}   (the same as `rigloop psychometric --db {db} --subject rat03 --out FIG`)")
    return 0

"""Commands that run rule files without rigs: ``check``, ``simulate`` and ``replay``.

Each ``add_<name>`` declares a command's arguments; its runner imports the work lazily
(so ``rigloop --help`` stays fast) and only wires arguments to it.
"""

from __future__ import annotations

import argparse

from .args import Count, add_rules_file, add_session, add_store, open_store, rules_name
from .executor_args import add_executor, executor_options


def add_check(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("check", help="validate a rule file (and a rig profile) and print its plan")
    add_rules_file(p, "a rule file path, or the name of a shipped example (e.g. tone_reversal)")
    p.add_argument("--profile", default=None, help="a rig profile path or name from rig_profiles/ (default: none)")
    p.set_defaults(func=_run_check)


def _run_check(args: argparse.Namespace) -> int:
    from .check_cmd import run_check

    return run_check(rules_name(args.rules), args.profile)


def add_replay(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("replay", help="feed stored trials through step; compare with the stored decisions")
    add_store(p, "the SQLite store (e.g. DATA_DIR/rigloop.sqlite)")
    add_session(p, "replay up to and including this session (default: every session)")
    p.add_argument("--rules", default=None,
                   help="another rule file (path or example name) to compare with (default: each session's own)")
    p.add_argument("--limit", type=Count(0), default=20, help="rows of the differences table")
    p.set_defaults(func=_run_replay)


def _run_replay(args: argparse.Namespace) -> int:
    from ..replay import format_differences, replay_subject
    from ..rules.load import load_any
    from .progress import Progress

    rules = load_any(rules_name(args.rules)) if args.rules else None
    with open_store(args.db) as store:
        bar = Progress(0, f"replaying {args.subject}")
        result = replay_subject(store, args.subject, session=args.session, rules=rules, progress=bar)
        bar.close()
    print(result.summary())
    table = format_differences(result, args.limit)
    if table:
        print(table)
    # with the session's own rules a difference is a fault; with other rules it is the answer
    return 1 if (result.differing and rules is None) else 0


def add_simulate(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("simulate", help="try a rule file on simulated animals before it touches a real one")
    add_rules_file(p, "a rule file path or example name")
    p.add_argument("--subjects", type=Count(1, 10_000), default=8, help="simulated animals")
    p.add_argument("--sessions", type=Count(1, 1_000), default=3, help="sessions per subject")
    p.add_argument("--max-trials", type=Count(1, 100_000), default=500, help="trials per session at most")
    p.add_argument("--task", choices=("lick", "choice"), default=None, help="the task (default: from the rule file's cues)")
    p.add_argument("--seed", type=Count(0), default=1, help="the run's seed: subject i gets seed * 1000 + i")
    p.add_argument("--db", default=None, help="also store every simulated trial in this SQLite file (default: none)")
    p.add_argument("--animal", default="typical", metavar="PRESET",
                   help="the kind of simulated animal (see rigloop/offline/simulate.py for the presets)")
    p.add_argument("--mix", default=None, metavar="PRESET=FRACTION,...",
                   help="a mix of presets over the subjects instead, e.g. typical=0.75,non_discriminator=0.25 "
                        "(default: every subject is --animal)")
    p.add_argument("--animals-from", default=None, metavar="FIT_JSON",
                   help="simulate the fitted models in this `rigloop fit --json` file instead of presets "
                        "(--subjects animals per fitted subject; default: none)")
    add_executor(p)
    p.set_defaults(func=_run_simulate)


def _run_simulate(args: argparse.Namespace) -> int:
    from ..core.names import check_name
    from ..offline.simulate import PRESETS
    from ..offline.sweep import print_simulation
    from ..offline.two_step_sim import TWO_STEP_PRESETS
    from ..rules.load import load_any

    check_name("--animal", "a simulated animal preset", args.animal, {**PRESETS, **TWO_STEP_PRESETS})
    if args.animals_from:
        from ..offline.fitted_animals import read_fit_json, simulate_fitted

        rules = load_any(rules_name(args.rules))
        return simulate_fitted(rules, read_fit_json(args.animals_from, rules), subjects=args.subjects,
                               sessions=args.sessions, max_trials=args.max_trials, seed=args.seed, db=args.db)
    from .progress import Progress

    with Progress(0, "simulating", unit="animals") as bar:
        return print_simulation(load_any(rules_name(args.rules)), subjects=args.subjects, sessions=args.sessions,
                                max_trials=args.max_trials, task=args.task, seed=args.seed, db=args.db,
                                animal=args.animal, mix=args.mix, progress=bar, **executor_options(args))

"""Commands that run rule files without rigs: ``check``, ``simulate`` and ``replay``.

Each ``add_<name>`` declares a command's arguments; its runner imports the work lazily
(so ``rigloop --help`` stays fast) and only wires arguments to it.
"""

from __future__ import annotations

import argparse

from .args import add_rules_file, add_session, add_store


def add_check(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("check", help="validate a rule file (and a rig profile) and print its plan")
    add_rules_file(p, "a rule file path, or the name of a shipped example (e.g. tone_reversal)")
    p.add_argument("--profile", default=None, help="a rig profile path or name from rig_profiles/")
    p.set_defaults(func=_run_check)


def _run_check(args: argparse.Namespace) -> int:
    from .check_cmd import run_check

    return run_check(args.rules, args.profile)


def add_replay(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("replay", help="feed stored trials through step; compare with the stored decisions")
    add_store(p, "the SQLite store (e.g. DATA_DIR/rigloop.sqlite)")
    add_session(p, "replay up to and including this session")
    p.add_argument("--rules", default=None, help="another rule file (path or example name) to compare with")
    p.add_argument("--limit", type=int, default=20, help="rows of the differences table (default 20)")
    p.set_defaults(func=_run_replay)


def _run_replay(args: argparse.Namespace) -> int:
    from ..replay import format_differences, replay_subject
    from ..rules.load import load_any
    from ..store import Store
    from .progress import Progress

    rules = load_any(args.rules) if args.rules else None
    with Store(args.db, create=False) as store:
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
    p.add_argument("--subjects", type=int, default=8)
    p.add_argument("--sessions", type=int, default=3, help="sessions per subject")
    p.add_argument("--max-trials", type=int, default=500, help="per session")
    p.add_argument("--task", choices=("lick", "choice"), default=None, help="default: from the rule file's cues")
    p.add_argument("--seed", type=int, default=1)
    p.add_argument("--db", default=None, help="also store every simulated trial in this SQLite file")
    p.add_argument("--animal", default="typical", metavar="PRESET",
                   help="the kind of simulated animal (default typical; see rigloop/simulate.py for the presets)")
    p.add_argument("--mix", default=None, metavar="PRESET=FRACTION,...",
                   help="a mix of presets over the subjects instead, e.g. typical=0.75,non_discriminator=0.25")
    p.set_defaults(func=_run_simulate)


def _run_simulate(args: argparse.Namespace) -> int:
    from ..offline.sweep import print_simulation
    from ..rules.load import load_any

    return print_simulation(load_any(args.rules), subjects=args.subjects, sessions=args.sessions,
                            max_trials=args.max_trials, task=args.task, seed=args.seed, db=args.db,
                            animal=args.animal, mix=args.mix)

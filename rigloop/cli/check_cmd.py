"""``rigloop check``: validate a rule file (and a rig profile) and print its plan."""

from __future__ import annotations


def run_check(target: str, profile: str | None = None) -> int:
    """``rigloop check``: validate a rule file (path or example name) and, optionally, a
    rig profile and the fit between them; print the plan. Returns the exit status."""
    import sys

    from ..errors import RuleError
    from ..rules.load import load_any
    from ..rules.plan import describe
    from ..rules.profile import load_profile

    population = _population_check(target)
    if population is not None:
        return population
    try:
        rules = load_any(target)
        prof = load_profile(profile) if profile else None
    except RuleError as err:
        print(f"rigloop check: {err}", file=sys.stderr)
        return 1
    problems = rules.check_profile(prof) if prof is not None else []
    if problems:
        head = f"rigloop check: {len(problems)} problem{'s' if len(problems) != 1 else ''} running "
        print(head + f"'{rules.name}' on rig profile '{prof.name}':", file=sys.stderr)
        for p in problems:
            print(f"  - {p}", file=sys.stderr)
        return 1
    print(describe(rules, prof), end="")
    print("ok: rule file is valid" + (f" and fits rig profile '{prof.name}'" if prof else ""))
    return 0


def _population_check(target: str) -> int | None:
    """A file with a [population] table is checked as a population file; None for anything else."""
    import pathlib
    import sys

    from ..errors import RuleError
    from ..offline.population import is_population_text, load_population

    p = pathlib.Path(target)
    try:
        if not (p.is_file() and is_population_text(p.read_text(encoding="utf-8"))):
            return None
    except (OSError, UnicodeDecodeError):
        return None
    try:
        pop = load_population(str(p))
    except RuleError as err:
        print(f"rigloop check: {err}", file=sys.stderr)
        return 1
    print(f"population '{pop.name}': {pop.description}")
    for g in pop.groups:
        drawn = ", ".join(f"{k} {_shown(v)}" for k, v in g.params.items()) or "preset values"
        source = f"fitted from {g.fitted_from}" if g.fitted_from else f"preset {g.preset}"
        print(f"  {g.name}: {100 * g.fraction:g}% of the cohort, {source}; {drawn}")
    print("ok: population file is valid")
    return 0


def _shown(v) -> str:
    if not isinstance(v, dict):
        return f"= {v:g}"
    keys = [k for k in v if k != "dist"]
    return f"~ {v['dist']}(" + ", ".join(f"{k} {v[k]:g}" for k in keys) + ")"

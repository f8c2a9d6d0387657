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

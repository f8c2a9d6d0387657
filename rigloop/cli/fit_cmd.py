"""``rigloop fit``: fit a stored subject and print the table(s) or JSON."""

from __future__ import annotations

from collections.abc import Sequence


def run_command(db: str, subject: str, learners: Sequence[str] | None = None,
                session: str | None = None, *, starts: int = 4, as_json: bool = False,
                out=None) -> int:
    """``rigloop fit``: fit the stored subject, print the table(s) (or JSON); exit status."""
    import json
    import sys

    from ..fit import fit_from_store, format_fit, format_ranking
    from ..store import Store
    from .progress import Progress

    out = out or sys.stdout
    names = list(learners) if learners else None
    with Store(db, create=False) as store:
        bar = Progress(0, f"fitting {subject}")
        got = fit_from_store(store, subject, learner=names if names and len(names) > 1 else
                             (names[0] if names else None), session=session, starts=starts,
                             progress=bar)
        bar.close()
    results = got if isinstance(got, list) else [got]
    if as_json:
        doc = {"subject": subject, "session": session, "fits": [r.to_dict() for r in results],
               "ranking": [r.learner for r in sorted(results, key=lambda r: r.aic)]}
        print(json.dumps(doc, indent=2), file=out)
        return 0
    scope = f", session {session}" if session else ", all sessions"
    print(f"subject {subject}{scope}", file=out)
    for r in results:
        print(format_fit(r), file=out)
    if len(results) > 1:
        print("ranking by AIC (lower is better; dAIC > 10: little support, common practice)",
              file=out)
        print(format_ranking(results), file=out)
    return 0

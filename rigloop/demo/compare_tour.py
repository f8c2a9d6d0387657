"""Demo part 4: before changing a rule, try the change on a simulated cohort.

Two variants of the shipped go/no-go shaping file differ in one number, the
behavioural d' lower bound that moves an animal out of the no-go introduction (1.0
against 0.5). Both run on the same few animals of the shipped spring cohort for a few
days, and ``rigloop compare`` says what the change does, with its figure.
"""

from __future__ import annotations

from pathlib import Path

ANIMALS = 8
DAYS = 2
VARY = "stages.nogo_intro.advance.when[1]=1.0,0.5"


def run(data: Path) -> int:
    from ..offline.comparison import format_text, run_comparison
    from ..offline.population import load_population
    from ..offline.rule_variants import parse_vary, variants
    from ..outputs.compare_figure import cohort_figure
    from ..rules.load import load_example, load_rules

    out = data / "compare.png"
    print(f"$ rigloop compare gonogo_shaping --vary '{VARY}' --population spring_cohort "
          f"--animals {ANIMALS} --days {DAYS} --out {out}")
    base = load_example("gonogo_shaping")
    entries = [(f"{base.name} {label}", load_rules(text, source=f"{base.source} ({label})"))
               for label, text in variants(base.text, [parse_vary(VARY)])]
    comparison = run_comparison(entries, load_population("spring_cohort"), animals=ANIMALS, days=DAYS, seed=1)
    doc = comparison.document(1)
    print(format_text(doc), end="")
    print(f"figure: {cohort_figure(str(out), comparison, doc)}")
    return 0

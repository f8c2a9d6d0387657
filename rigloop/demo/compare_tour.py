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
    from ..cli.compare_cmd import run_compare

    out = data / "compare.png"
    print(f"$ rigloop compare gonogo_shaping --vary '{VARY}' --population spring_cohort "
          f"--animals {ANIMALS} --days {DAYS} --out {out}")
    return run_compare(["gonogo_shaping"], population="spring_cohort", animals=ANIMALS, days=DAYS, seed=1,
                       vary=[VARY], out=str(out))

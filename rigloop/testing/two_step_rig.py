"""A virtual rig for the two-stage task: a simulated animal (offline/two_step_sim.py) and
the task programme's part (transitions, drifting reward probabilities), reporting every
trial's two steps to a live daemon over ZeroMQ or the serial line protocol.

    with ZmqRig(endpoint, "box3") as rig:
        pairs = run_two_step_session(rig, "model_based", "m1", "d1", trials=200)

``pairs`` are ``(event, decision after it)``, as ``drive_session`` returns them.
"""

from __future__ import annotations

from typing import Any

from ..core.trial import Decision, TrialEvent
from ..offline.two_step_sim import TWO_STEP_PRESETS, TwoStepAnimal, two_step_animal

STATES = ("centre_light", "port_a_light", "port_b_light")  # rig_profiles/nosepoke_3port_twostage.toml


def run_two_step_session(client: Any, preset: str, subject: str, session: str, *, trials: int,
                         rules: str = "two_step", seed: int = 1, animal: TwoStepAnimal | None = None,
                         start_time: float | None = None) -> list[tuple[TrialEvent, Decision]]:
    """Run one session of the two-stage task through ``client`` (a ZmqRig or SerialRig)
    for a ``preset`` animal (``TWO_STEP_PRESETS``), or ``animal`` to carry one on."""
    from . import drive_session

    if animal is None:
        animal = two_step_animal(preset, subject, seed, states=STATES)
    return drive_session(client, animal, session=session, rules=rules, trials=trials, start_time=start_time)


__all__ = ["STATES", "TWO_STEP_PRESETS", "run_two_step_session"]

"""rigloop: adaptive, Bayesian trial scheduling beside behavioural rig controllers.

General layout: one room per job, each importing only the rooms above it in this list
(tests/test_layout.py holds the order, the purity of the first rooms, and no cycles).

  errors, version  the error tree; the version string
  core/      the animal's model and THE step, pure (stdlib + numpy): trial values, features,
             learners/, the learning curve and sequential tests, the animal's own behaviour,
             response models, SubjectState, step
  rules/     the rule-file language (expr/), loading, the engine, policies, welfare limits; pure
  wire/      message codecs, msgpack and the serial line protocol (no I/O)
  store/     SQLite: sessions, trials (with decisions and quantities), snapshots
  links/     the only zmq / pyserial imports: ZeroMQ, serial, CURVE keys
  replay/    stored sessions back through step; crash recovery
  offline/   simulated animals, sweeps, their truth, batched learners, CSV import
  fit/       learner parameters from behaviour
  outputs/   data and figures out
  serve/     the daemon: links -> step -> store -> reply/publish; its client, the live table
  testing/   virtual rigs, pseudo-terminals, a daemon subprocess (tests and labs' own tests)
  demo/      `make demo`
  cli/       argument parsing and wiring only

``rigloop.open(path)`` reads a store as pandas DataFrames (outputs/frames.py).

The scripting API keeps its paths: rigloop.rules.load (load_rules_file), rigloop.subject
(new_subject), rigloop.step (begin_session, step), rigloop.trial (the value types).
"""

from .core.trial import CuePresentation, Decision, Outcome, Response, TrialEvent
from .errors import BadArgument, BadEvent, RigloopError, RuleError, StoreError, WireError
from .version import __version__


def open(path):  # noqa: A001  (rigloop.open, as the analysis API reads; the builtin is untouched elsewhere)
    """The store at ``path`` opened read-only as pandas DataFrames (``rigloop.outputs.frames.Frames``).

    Imported on first use, so ``import rigloop`` stays light (no pandas until then)."""
    from .outputs.frames import Frames

    return Frames(path)


__all__ = [
    "BadArgument",
    "BadEvent",
    "CuePresentation",
    "Decision",
    "Outcome",
    "Response",
    "RigloopError",
    "RuleError",
    "StoreError",
    "TrialEvent",
    "WireError",
    "__version__",
]

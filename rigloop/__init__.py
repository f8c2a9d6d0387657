"""rigloop: adaptive, Bayesian trial scheduling beside behavioural rig controllers.

Layout (data flows top to bottom; see DEVELOPERS.md):
  trial        TrialEvent, Decision: frozen, validated values
  features     trial -> feature rows and rewards over time bins
  learners/    Rescorla-Wagner, Kalman filter, TD(lambda), Kalman TD (pure numpy)
  performance  state-space learning curve, criteria, d', SPRT
  rules/       rule-file language, policies, welfare limits
  subject      SubjectState: all one animal carries from trial to trial
  step         step(state, event, rules): THE function, shared by live and offline
  store        SQLite: sessions, trials (with decisions and quantities), snapshots
  wire, links/ message codecs (no I/O) and the ZeroMQ / serial links
  daemon       links -> step -> store -> reply/publish
  replay, simulate, fit, report: offline tools over the same core
"""

from .core.trial import CuePresentation, Decision, Outcome, Response, TrialEvent
from .errors import BadArgument, BadEvent, RigloopError, RuleError, StoreError, WireError
from .version import __version__

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

"""Rule files: the expression language, validation, policies, welfare limits, engine.

  expr/     the checked expression language: vocab, tree, check (parse, type-check), run (evaluate)
  model     frozen specs a rule file loads into
  load      TOML -> specs, every problem at once (the only file-reading part, with profile)
  reader    Reader: typed getters over TOML tables that record problems
  read_spec, read_model, read_cues, read_stages, read_policies   the sections of a rule file
  state     ScheduleState: what the schedule carries from trial to trial
  view      SubjectView protocol (what rules read from the models), StaticView
  policies  next cue, reward probability, staircase
  welfare   limits applied after every policy
  engine    open_session / observe / decide
  ruleset   Rules: a loaded file bound to the engine
  plan      the plan in plain words (``rigloop check``)
  profile   rig profiles: cues, responses, serial settings, valve calibration
"""

from .engine import Plan
from .load import example_names, load_example, load_rules, load_rules_file
from .model import Block, Contingency, CueSpec, FeatureSpec, LearnerSpec, PerformanceSpec, Stage
from .profile import RigProfile, load_profile
from .ruleset import Rules
from .state import ScheduleState
from .view import StaticView, SubjectView
from .welfare import WelfareLimits

__all__ = [
    "Block",
    "Contingency",
    "CueSpec",
    "FeatureSpec",
    "LearnerSpec",
    "PerformanceSpec",
    "Plan",
    "RigProfile",
    "Rules",
    "ScheduleState",
    "Stage",
    "StaticView",
    "SubjectView",
    "WelfareLimits",
    "example_names",
    "load_example",
    "load_profile",
    "load_rules",
    "load_rules_file",
]

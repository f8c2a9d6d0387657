"""Rule file (TOML) -> validated specs, reporting every problem at once.

Each problem names its key path (``stages.acquisition.blocks.a1.end.when``); an
expression problem also shows the expression with a caret under the fault and what
is allowed there. ``load_rules`` is pure; ``load_rules_file`` and ``load_example`` are
the only functions here that read files.

This module holds the entry points (the public scripting API); the sections are read by
``read_spec`` (top level, session end), ``read_model`` (learner, features, performance,
behaviour, outcomes, response model), ``read_cues``, ``read_stages`` (stages, blocks, the
graph check) and ``read_policies`` (next cue, reward, staircase, SPRT), all through one
``reader.Reader``.

The file format is described in the README section "Rule files"; in short::

    name = "..."                 reward_unit_ul = 4.0       first_stage = "..."
    [learner]      model = "kalman_td", gamma = ..., ...
    [features]     kind = "serial_compound", dt = 0.25, n_bins = 8
    [performance]  chance = 0.5, sigma2 = 0.05
    [behaviour]    sigma2 = 0.2, prior_var = 2.0   (the per-cue estimate of what the animal does)
    [outcomes]     timeout = -0.5, airpuff = -1.0, noise = -0.25   (reward units)
    [response_model]  beta, theta, lapse, bias, persev, decay
    [cues]         tone_hi = { role = "go" }
    [stages.S]     first_block, advance = {when, to}, step_back = {when, to}, new_session
    [stages.S.blocks.B]  contingency, next_cue, reward, staircase, sprt, end
    [session_end]  name = "expression"
    [welfare]      limits (see welfare.py)
"""

from __future__ import annotations

import hashlib
import tomllib
from importlib import resources
from pathlib import Path

from ..errors import RuleError
from .read_cues import MAX_CUES
from .read_model import LEARNER_PARAMS
from .read_policies import NEXT_CUE_KEYS
from .read_spec import TOP_KEYS, parse_spec
from .read_stages import BLOCK_KEYS, MAX_BLOCKS, MAX_STAGES, STAGE_KEYS

__all__ = [
    "BLOCK_KEYS",
    "LEARNER_PARAMS",
    "MAX_BLOCKS",
    "MAX_CUES",
    "MAX_STAGES",
    "NEXT_CUE_KEYS",
    "STAGE_KEYS",
    "TOP_KEYS",
    "example_names",
    "example_text",
    "load_any",
    "load_example",
    "load_rules",
    "load_rules_file",
    "parse_spec",
]


def load_rules(text: str, source: str = "<string>"):
    """Parse and validate a rule file's text; raise RuleError listing every problem."""
    from .ruleset import Rules

    if not isinstance(text, str):
        raise RuleError([f"rule text must be a string (got {type(text).__name__})"], source)
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise RuleError([f"not valid TOML: {err}"], source) from None
    spec, problems = parse_spec(data)
    if problems:
        raise RuleError(problems, source)
    return Rules(spec=spec, text=text, sha256=hashlib.sha256(text.encode("utf-8")).hexdigest(), source=source)


def load_rules_file(path):
    """Read a rule file from disk (UTF-8) and load it; the source in errors is the path."""
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as err:
        raise RuleError([f"cannot read the rule file: {err}"], str(p)) from None
    return load_rules(text, source=str(p))


def example_names() -> list[str]:
    """Names of the rule files shipped in ``rigloop/examples``."""
    root = resources.files("rigloop.examples")
    return sorted(f.name[:-5] for f in root.iterdir() if f.name.endswith(".toml"))


def example_text(name: str) -> str:
    """The text of a shipped example rule file; a RuleError lists the names when there is none."""
    names = example_names()
    if name not in names:
        raise RuleError([f"no example named {name!r} (examples: {', '.join(names)})"], name)
    return resources.files("rigloop.examples").joinpath(f"{name}.toml").read_text(encoding="utf-8")


def load_example(name: str):
    """Load a shipped example rule file by name, e.g. ``load_example("tone_reversal")``."""
    return load_rules(example_text(name), source=f"example:{name}")


def load_any(name_or_path: str):
    """A path when one exists (or it ends in .toml), else a shipped example's name."""
    p = Path(name_or_path)
    if p.suffix == ".toml" or p.exists():
        return load_rules_file(p)
    return load_example(name_or_path)

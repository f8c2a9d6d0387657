"""Building frozen value types on the per-trial hot path.

A frozen dataclass's ``__init__`` stores each field through ``object.__setattr__``, the
costliest part of building one. ``builder(cls)`` returns a function that builds ``cls``
from every field's value, in declaration order, through the fields' slot descriptors
instead: the same object, a few times cheaper. It skips ``__post_init__``, so it is only
for values the code has just computed itself (a step's next state, its Update, a plan).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import fields
from typing import Any, TypeVar

T = TypeVar("T")


def builder(cls: type[T]) -> Callable[..., T]:
    """``build(*values)`` -> a ``cls`` holding ``values`` (one per field, in order)."""
    setters = tuple(cls.__dict__[f.name].__set__ for f in fields(cls))
    n = len(setters)
    new = object.__new__

    def build(*values: Any) -> T:
        if len(values) != n:
            raise TypeError(f"{cls.__name__} has {n} fields, got {len(values)} values")
        obj = new(cls)
        for store, value in zip(setters, values):  # (lengths checked above)
            store(obj, value)
        return obj

    build.__doc__ = f"``{cls.__name__}(...)`` of every field's value, in order, without its __init__."
    return build

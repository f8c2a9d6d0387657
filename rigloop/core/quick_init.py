"""A cheaper ``__init__`` for the frozen, slotted value types built on every trial.

A frozen dataclass's generated ``__init__`` sets each field with ``object.__setattr__``
(frozen classes refuse plain assignment): a global lookup, an attribute lookup and a call
per field. The ``__init__`` here does the same assignments through each slot's own
descriptor (``Cls.field.__set__``, bound once), which skips the class's refusing
``__setattr__`` just as ``object.__setattr__`` does, and then calls ``__post_init__`` as
the generated one does: the same object, the same checks and errors, for ~2/3 of the
time (a Decision 2.3-2.7 -> 1.4-1.6 µs, tools/bench/step.py). The generated ``__init__`` stays on
the class as ``_dataclass_init``, the reference tests/test_fast_paths.py holds it to.
"""

from __future__ import annotations

import dataclasses
import inspect

__all__ = ["quick_init"]

_UNSET = object()  # a default_factory field left out


def quick_init(cls: type) -> type:
    """Class decorator, above ``@dataclass(frozen=True, slots=True)``: replace the generated
    ``__init__`` by one that sets each slot through its descriptor (see the module docstring).
    Fields with defaults and default factories; no ``InitVar``, keyword-only or ``init=False``
    fields (refused at import, where it is seen)."""
    params = getattr(cls, "__dataclass_params__", None)
    if params is None or not params.frozen or "__slots__" not in cls.__dict__:
        raise TypeError(f"quick_init: {cls.__name__} must be a frozen dataclass with slots")
    fields = dataclasses.fields(cls)
    if list(inspect.signature(cls.__init__).parameters)[1:] != [f.name for f in fields]:
        raise TypeError(f"quick_init: {cls.__name__}'s __init__ takes other arguments than its fields (InitVar?)")
    names: dict[str, object] = {"_UNSET": _UNSET}
    args, body = [], []
    for i, f in enumerate(fields):
        if not f.init or f.kw_only:
            raise TypeError(f"quick_init: {cls.__name__}.{f.name} is a field kind it does not handle")
        names[f"_set{i}"] = cls.__dict__[f.name].__set__
        if f.default_factory is not dataclasses.MISSING:  # a new value per object, as the generated one makes
            names[f"_factory{i}"] = f.default_factory
            args.append(f"{f.name}=_UNSET")
            body.append(f"    _set{i}(self, _factory{i}() if {f.name} is _UNSET else {f.name})")
            continue
        if f.default is dataclasses.MISSING:
            args.append(f.name)
        else:
            names[f"_default{i}"] = f.default
            args.append(f"{f.name}=_default{i}")
        body.append(f"    _set{i}(self, {f.name})")
    if hasattr(cls, "__post_init__"):
        body.append("    self.__post_init__()")
    source = f"def __init__(self, {', '.join(args)}):\n" + "\n".join(body or ["    pass"]) + "\n"
    exec(source, names)  # noqa: S102  (the source is built from the class's own field names)
    init = names["__init__"]
    init.__qualname__ = f"{cls.__qualname__}.__init__"
    init.__doc__ = cls.__init__.__doc__
    cls._dataclass_init = cls.__init__
    cls.__init__ = init
    return cls

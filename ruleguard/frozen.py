"""Frozen records: dataclasses that cost little to define.

``@record`` (or ``@record(eq=False)``) makes a class what
``@dataclasses.dataclass(frozen=True)`` (or ``frozen=True, eq=False``) makes
it: the same fields (``dataclasses.fields``, ``replace``, ``asdict`` and
pickling work unchanged), the same ``__init__`` (defaults, default
factories, keyword-only fields, ``__post_init__``), the same ``__repr__``,
``__eq__`` and ``__hash__``, and the same ``FrozenInstanceError`` on
assignment or deletion of an attribute. Methods written in the class body
are kept, as the standard decorator keeps them.

Why: Python's decorator writes the source text of up to six methods per
class and compiles each with ``exec`` (0.9 ms per class on the machine of
docs/scaling.md; 76 classes on the pre-commit hook's route, 0.07 s of its
start). Here ``__repr__``, ``__eq__``, ``__hash__``, ``__setattr__`` and
``__delattr__`` are closures over the class's field names (attribute tuples
through :func:`operator.attrgetter`, compiled code from the standard
library), and only ``__init__`` is made, when the first instance of the
class is built (a class never built on a route costs nothing more): compiled
once per shape of field list and copied with the class's own names, so the
62 records of the demo's edited-file route compile 26 functions (18.5 ->
11.3 ms of that route).

The docstring of a class without one is its signature, as the standard
decorator writes it, but composed from the fields rather than read with
``inspect.signature`` (whose first use compiles the tokenizer's patterns,
some 5 ms of a start-up).

Differences from the standard decorator, none observable through the
instances: ``__dataclass_params__`` records the standard decorator's
options as called here (``init=False, repr=False, eq=False``), and until the
first instance exists ``inspect.signature`` of the class shows
``(*args, **kwargs)``. ``InitVar`` fields are not supported (none exist in
ruleguard; they raise ``TypeError`` at definition).
"""

from __future__ import annotations

import dataclasses
import reprlib
import types
from collections.abc import Callable
from operator import attrgetter
from typing import Any, TypeVar

__all__ = ["record"]

T = TypeVar("T", bound=type)

_OBJECT_SETATTR = object.__setattr__


def record(cls: T | None = None, /, *, eq: bool = True) -> Any:
    """Make ``cls`` a frozen dataclass (``eq=False``: identity equality and hash).

    Use as ``@record`` or ``@record(eq=False)``.
    """

    def wrap(cls: T) -> T:
        return _make_record(cls, eq)

    return wrap if cls is None else wrap(cls)


def _make_record(cls: T, eq: bool) -> T:
    own = dict(cls.__dict__)
    explicit_hash = "__hash__" in own and not (own["__hash__"] is None and "__eq__" in own)
    for name in ("__setattr__", "__delattr__"):
        if name in own:
            raise TypeError(f"cannot overwrite attribute {name} in class {cls.__name__}")
    undocumented = not own.get("__doc__")
    if undocumented:  # else the standard decorator reads a signature of object.__init__
        cls.__doc__ = "(written below)"
    # the standard decorator with every method switched off: it only collects
    # the fields (inherited ones included) and sets the class attributes
    cls = dataclasses.dataclass(cls, init=False, repr=False, eq=False)
    fields = dataclasses.fields(cls)
    names = frozenset(f.name for f in fields)
    for name, f in cls.__dataclass_fields__.items():  # fields() leaves out InitVar and ClassVar
        if name not in names and "InitVar" in str(f.type):
            raise TypeError(f"{cls.__name__}.{name}: records take no InitVar fields")
    seen_default = False
    for f in fields:
        if f.init and not f.kw_only:
            has_default = (f.default is not dataclasses.MISSING
                           or f.default_factory is not dataclasses.MISSING)
            if seen_default and not has_default:
                raise TypeError(f"non-default argument {f.name!r} follows default argument")
            seen_default = seen_default or has_default

    def put(name: str, value: Callable) -> None:
        if name not in own:
            value.__qualname__ = f"{cls.__qualname__}.{name}"
            setattr(cls, name, value)

    if undocumented:
        cls.__doc__ = cls.__name__ + _signature_text(fields)
    put("__init__", _lazy_init(cls))
    put("__repr__", _repr(tuple(f.name for f in fields if f.repr)))
    if eq:
        put("__eq__", _eq(_tuple_of(tuple(f.name for f in fields if f.compare))))
        if not explicit_hash:
            hashed = tuple(f.name for f in fields if (f.compare if f.hash is None else f.hash))
            cls.__hash__ = _hash(_tuple_of(hashed))  # type: ignore[method-assign]

    def __setattr__(self: Any, name: str, value: Any) -> None:
        if type(self) is cls or name in names:
            raise dataclasses.FrozenInstanceError(f"cannot assign to field {name!r}")
        super(cls, self).__setattr__(name, value)

    def __delattr__(self: Any, name: str) -> None:
        if type(self) is cls or name in names:
            raise dataclasses.FrozenInstanceError(f"cannot delete field {name!r}")
        super(cls, self).__delattr__(name)

    put("__setattr__", __setattr__)
    put("__delattr__", __delattr__)
    return cls


def _signature_text(fields) -> str:
    """The text of the ``__init__`` signature, as ``inspect.signature`` prints it
    (the standard decorator's docstring of a class without one)."""
    positional, keyword = [], []
    for f in fields:
        if not f.init:
            continue
        kind = f.type if isinstance(f.type, str) else _annotation_text(f.type)
        param = f"{f.name}: {kind!r}" if isinstance(f.type, str) else f"{f.name}: {kind}"
        if f.default is not dataclasses.MISSING:
            param += f" = {f.default!r}"
        elif f.default_factory is not dataclasses.MISSING:
            param += " = <factory>"
        (keyword if f.kw_only else positional).append(param)
    return "(" + ", ".join(positional + (["*", *keyword] if keyword else [])) + ")"


def _annotation_text(annotation: Any) -> str:
    if isinstance(annotation, type) and not hasattr(annotation, "__origin__"):
        if annotation.__module__ == "builtins":
            return annotation.__qualname__
        return f"{annotation.__module__}.{annotation.__qualname__}"
    return repr(annotation).replace("typing.", "")


def _tuple_of(names: tuple[str, ...]) -> Callable[[Any], tuple]:
    """``obj -> (obj.<name>, ...)`` for these names, in order."""
    if len(names) >= 2:
        return attrgetter(*names)
    if len(names) == 1:
        one = attrgetter(names[0])
        return lambda obj: (one(obj),)
    return lambda obj: ()


def _repr(shown: tuple[str, ...]) -> Callable[[Any], str]:
    @reprlib.recursive_repr()
    def __repr__(self: Any) -> str:
        inner = ", ".join(f"{name}={getattr(self, name)!r}" for name in shown)
        return f"{self.__class__.__qualname__}({inner})"

    return __repr__


def _eq(key: Callable[[Any], tuple]) -> Callable[[Any, Any], Any]:
    def __eq__(self: Any, other: Any) -> Any:
        if other.__class__ is self.__class__:
            return key(self) == key(other)
        return NotImplemented

    return __eq__


def _hash(key: Callable[[Any], tuple]) -> Callable[[Any], int]:
    def __hash__(self: Any) -> int:
        return hash(key(self))

    return __hash__


def _lazy_init(cls: type) -> Callable[..., None]:
    """A stand-in ``__init__`` that compiles the real one at the first instance."""

    def __init__(instance: Any, /, *args: Any, **kwargs: Any) -> None:
        real = _compile_init(cls)
        if cls.__dict__.get("__init__") is __init__:
            real.__qualname__ = f"{cls.__qualname__}.__init__"
            cls.__init__ = real  # type: ignore[misc]
        real(instance, *args, **kwargs)

    return __init__


class _Factory:
    """The default of a parameter whose field has a default factory."""

    def __repr__(self) -> str:
        return "<factory>"


_FACTORY = _Factory()

#: Compiled ``__init__`` templates by shape (see :func:`_compile_init`).
_TEMPLATES: dict[tuple, Any] = {}


def _compile_init(cls: type) -> Callable[..., None]:
    """The ``__init__`` the standard frozen dataclass would write for ``cls``.

    The code is compiled once per *shape* (the kind of each field: a plain or
    factory parameter, positional or keyword-only, a default or factory
    outside ``__init__``; whether ``__post_init__`` is called), with
    placeholder names, and each class gets a copy of it with its own names
    (``CodeType.replace``): most records share a few shapes, and compiling
    costs about 0.17 ms a class (on the machine of docs/scaling.md). Default
    values are the function's ``__defaults__`` and ``__kwdefaults__``.
    """
    fields = dataclasses.fields(cls)
    shape, names, positional, keyword = [], [], [], []
    namespace: dict[str, Any] = {"__record_set__": _OBJECT_SETATTR, "__record_factory__": _FACTORY}
    for f in fields:
        has_default = f.default is not dataclasses.MISSING
        has_factory = not has_default and f.default_factory is not dataclasses.MISSING
        index = len(names)
        if f.init:
            kind = ("k" if f.kw_only else "p") + ("f" if has_factory else "")
            default = (_FACTORY if has_factory else
                       f.default if has_default else dataclasses.MISSING)
            (keyword if f.kw_only else positional).append((f.name, default))
        elif has_default or has_factory:
            kind = "nf" if has_factory else "nd"
            if has_default:
                namespace[f"__default_{index}__"] = f.default
        else:
            continue  # a field outside __init__ without a default: left unset
        if has_factory:
            namespace[f"__factory_{index}__"] = f.default_factory
        shape.append(kind)
        names.append(f.name)
    post_init = hasattr(cls, "__post_init__")
    key = (tuple(shape), post_init)
    template = _TEMPLATES.get(key)
    if template is None:
        template = _TEMPLATES[key] = _template(*key)
    self_name = "__record_self__" if "self" in names else "self"
    real = {"_s": self_name, **{f"_a{i}": n for i, n in enumerate(names)}}
    code = template.replace(
        co_varnames=tuple(real.get(v, v) for v in template.co_varnames),
        co_consts=tuple(real.get(c, c) if type(c) is str else c for c in template.co_consts),
        co_name="__init__", co_qualname=f"{cls.__qualname__}.__init__",
    )
    # the defaults are the trailing parameters (checked when the class was made)
    defaults = tuple(d for _, d in positional if d is not dataclasses.MISSING)
    init = types.FunctionType(code, namespace, "__init__", defaults or None)
    kwdefaults = {n: d for n, d in keyword if d is not dataclasses.MISSING}
    if kwdefaults:
        init.__kwdefaults__ = kwdefaults
    init.__annotations__ = {f.name: f.type for f in fields if f.init} | {"return": None}
    return init


def _template(shape: tuple[str, ...], post_init: bool):
    """The code of an ``__init__`` of this shape, with placeholder names (``_s`` the
    instance, ``_a<i>`` the i-th field's parameter and name)."""
    positional = [f"_a{i}" for i, k in enumerate(shape) if k[0] == "p"]
    keyword = [f"_a{i}" for i, k in enumerate(shape) if k[0] == "k"]
    body = []
    for i, kind in enumerate(shape):
        name = f"'_a{i}'"
        if kind in ("p", "k"):
            value = f"_a{i}"
        elif kind in ("pf", "kf"):
            value = f"__factory_{i}__() if _a{i} is __record_factory__ else _a{i}"
        elif kind == "nd":
            value = f"__default_{i}__"
        else:  # "nf"
            value = f"__factory_{i}__()"
        body.append(f"    __record_set__(_s, {name}, {value})")
    if post_init:
        body.append("    _s.__post_init__()")
    params = ["_s", *positional] + (["*", *keyword] if keyword else [])
    source = f"def __init__({', '.join(params)}):\n" + ("\n".join(body) or "    pass") + "\n"
    namespace: dict[str, Any] = {}
    exec(source, namespace)  # source built above from placeholder names only
    return namespace["__init__"].__code__

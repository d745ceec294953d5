"""ruleguard.frozen.record against the standard library's frozen dataclass.

The outside reference of every check is Python's own
``dataclasses.dataclass(frozen=True)`` (and ``frozen=True, eq=False``): the
same class body is decorated both ways and the two classes must behave
alike (construction, defaults, errors, repr, equality, hashing, frozen
attributes, ``replace``, ``fields``, ``asdict``, pickling).
"""

from __future__ import annotations

import dataclasses
import inspect
import pickle
from pathlib import Path

import pytest
from hypothesis import given
from hypothesis import strategies as st

from ruleguard.frozen import record


def _pair(body: str, *, eq: bool = True, extra: dict | None = None):
    """The class defined by ``body`` (source of a class named C), made twice:
    (standard frozen dataclass, record)."""
    made = []
    for decorate in (lambda c: dataclasses.dataclass(c, frozen=True, eq=eq),
                     lambda c: record(c) if eq else record(eq=False)(c)):
        namespace = {"dataclasses": dataclasses, "field": dataclasses.field, **(extra or {})}
        exec(body, namespace)  # test source written below
        made.append(decorate(namespace["C"]))
    return made


PLAIN = '''
class C:
    """A record."""
    a: int
    b: float = 1.5
    c: tuple = ()
    d: list = field(default_factory=list)
    e: str = field(default="x", repr=False)
    f: int = field(default=0, compare=False)
'''

values = st.one_of(st.integers(), st.text(max_size=5), st.tuples(st.integers()),
                   st.floats(allow_nan=False))


@given(a=values, b=values, c=values)
def test_construction_equality_hash_and_repr_as_the_standard_decorator(a, b, c):
    std, rec = _pair(PLAIN)
    for args in ((a,), (a, b), (a, b, c)):
        x, y = std(*args), rec(*args)
        assert repr(x).replace("C(", "") == repr(y).replace("C(", "")
        assert dataclasses.astuple(x) == dataclasses.astuple(y)
        assert (x == std(*args)) and (y == rec(*args))
        try:
            expected = hash(x)
        except TypeError:  # an unhashable field value (a list)
            with pytest.raises(TypeError):
                hash(y)
        else:
            assert hash(y) == expected


def test_defaults_factories_and_signature():
    std, rec = _pair(PLAIN)
    x, y = std(1), rec(1)
    assert y.d == [] and y.d is not rec(1).d  # a fresh list per instance, as x.d
    assert dataclasses.asdict(x) == dataclasses.asdict(y)
    assert [f.name for f in dataclasses.fields(rec)] == [f.name for f in dataclasses.fields(std)]
    # after the first instance the signature is the standard one
    assert str(inspect.signature(rec)) == str(inspect.signature(std))
    assert rec(a=2, f=9) == rec(a=2, f=10)  # f not compared
    assert hash(rec(a=2, d=(), f=9)) == hash(rec(a=2, d=(), f=10))
    assert "e=" not in repr(y)


def test_the_same_errors():
    std, rec = _pair(PLAIN)
    for cls in (std, rec):
        with pytest.raises(TypeError):
            cls()
        with pytest.raises(TypeError):
            cls(1, 2, 3, [], "y", 0, 99)
        with pytest.raises(TypeError):
            cls(1, z=3)
        obj = cls(1)
        with pytest.raises(dataclasses.FrozenInstanceError):
            obj.a = 2
        with pytest.raises(dataclasses.FrozenInstanceError):
            del obj.b
        with pytest.raises(dataclasses.FrozenInstanceError):
            obj.new = 1
    with pytest.raises(TypeError):
        _pair("class C:\n    a: int = 0\n    b: int\n")
    with pytest.raises(TypeError):
        _pair("class C:\n    a: int\n    def __setattr__(self, n, v):\n        pass\n")


def test_replace_pickle_and_comparison_with_other_types():
    _, rec = _pair(PLAIN, extra={})
    globals()["_Picklable"] = rec  # pickle finds the class by module and name
    rec.__qualname__ = rec.__name__ = "_Picklable"
    rec.__module__ = __name__
    obj = rec(3, 2.5, (1,))
    assert dataclasses.replace(obj, b=7.0) == rec(3, 7.0, (1,))
    back = pickle.loads(pickle.dumps(obj))
    assert back == obj and back is not obj
    assert obj != (3, 2.5, (1,)) and obj.__eq__(object()) is NotImplemented


def test_post_init_may_normalize_fields():
    body = '''
class C:
    x: object
    y: float = 0.0
    def __post_init__(self):
        object.__setattr__(self, "x", tuple(self.x))
        if self.y < 0:
            raise ValueError("y")
'''
    std, rec = _pair(body)
    assert rec([1, 2]).x == std([1, 2]).x == (1, 2)
    for cls in (std, rec):
        with pytest.raises(ValueError):
            cls([1], -1.0)


def test_identity_equality_with_eq_false():
    std, rec = _pair(PLAIN, eq=False)
    for cls in (std, rec):
        a, b = cls(1), cls(1)
        assert a != b and a == a
        assert hash(a) == object.__hash__(a)
        with pytest.raises(dataclasses.FrozenInstanceError):
            a.a = 5


def test_methods_of_the_class_body_are_kept_and_inheritance_works():
    body = '''
class C:
    a: int
    def __repr__(self):
        return "mine"
'''
    _, rec = _pair(body)
    assert repr(rec(1)) == "mine"

    @record
    class Base:
        a: int
        b: int = 2

    @record
    class Child(Base):
        c: int = 3

    child = Child(1, c=5)
    assert (child.a, child.b, child.c) == (1, 2, 5)
    assert child != Base(1, 2) and child == Child(1, 2, 5)
    assert repr(child).endswith("Child(a=1, b=2, c=5)")
    with pytest.raises(dataclasses.FrozenInstanceError):
        child.c = 1

    class Plain(Base):  # a subclass without the decorator: Base's __init__
        pass

    plain = Plain(4)
    assert plain.a == 4 and plain.b == 2
    plain.extra = 1  # not a field and not the record's own class: allowed, as the standard
    assert plain.extra == 1


def test_keyword_only_fields():
    body = '''
class C:
    a: int
    b: int = field(default=1, kw_only=True)
    c: int = field(kw_only=True, default=0)
'''
    std, rec = _pair(body)
    assert rec(1, b=2, c=3) == rec(1, c=3, b=2)
    assert str(inspect.signature(rec)) == str(inspect.signature(std))
    for cls in (std, rec):
        with pytest.raises(TypeError):
            cls(1, 2)


def test_a_field_named_self():
    body = "class C:\n    self: int\n    other: int = 0\n"
    std, rec = _pair(body)
    assert rec(self=1).self == std(self=1).self == 1


def test_the_package_makes_its_frozen_records_with_record():
    """House style (DEVELOPERS.md): ``@record``, not ``@dataclass(frozen=True)``,
    so that importing a module compiles no dataclass methods."""
    root = Path(__file__).resolve().parents[1] / "ruleguard"
    offenders = [
        str(path.relative_to(root))
        for path in root.rglob("*.py")
        if path.name != "frozen.py" and "dataclass(frozen=True" in path.read_text(encoding="utf-8")
    ]
    assert offenders == []


def test_fields_outside_init():
    body = '''
class C:
    a: int
    b: int = field(default=5, init=False)
    c: list = field(default_factory=list, init=False)
    d: int = field(init=False, default=0, repr=False)
'''
    std, rec = _pair(body)
    x, y = std(1), rec(1)
    assert (y.a, y.b, y.c, y.d) == (x.a, x.b, x.c, x.d) == (1, 5, [], 0)
    assert str(inspect.signature(rec)) == str(inspect.signature(std))
    with pytest.raises(TypeError):
        rec(1, 2)


@pytest.mark.parametrize("annotations", [True, False])
def test_the_docstring_of_an_undocumented_class_is_the_standard_one(annotations):
    """A class without a docstring gets its signature as one, as the standard
    decorator writes it; a documented class keeps its own."""
    body = '''
class C:
    a: int
    b: tuple[int, ...] = ()
    c: dict = field(default_factory=dict)
    d: Path = field(default=None, repr=False)
    e: int = field(default=5, init=False)
    f: str = field(default="x", kw_only=True)
'''
    if annotations:
        body = "from __future__ import annotations\n" + body
    std, rec = _pair(body, extra={"Path": Path})
    assert rec.__doc__ == std.__doc__
    std, rec = _pair(PLAIN)
    assert rec.__doc__ == std.__doc__ == "A record."


def test_classes_of_one_shape_share_compiled_code_under_their_own_names():
    """Two records with the same kinds of fields get one compiled ``__init__``
    (the same bytecode) with their own parameter names; the reference for the
    names, defaults and errors is the standard decorator."""
    one = "class C:\n    a: int\n    b: str = 'x'\n    c: list = field(default_factory=list)\n"
    two = "class C:\n    p: int\n    q: str = 'y'\n    r: list = field(default_factory=list)\n"
    (std1, rec1), (std2, rec2) = _pair(one), _pair(two)
    x, y = rec1(1), rec2(q="z", p=2)
    assert (x.a, x.b, x.c, y.p, y.q, y.r) == (1, "x", [], 2, "z", [])
    assert rec1.__init__.__code__.co_code == rec2.__init__.__code__.co_code
    assert rec1.__init__.__code__.co_varnames[:4] == ("self", "a", "b", "c")
    assert str(inspect.signature(rec2)) == str(inspect.signature(std2))
    for rec, std in ((rec1, std1), (rec2, std2)):
        with pytest.raises(TypeError) as mine:
            rec()
        with pytest.raises(TypeError) as theirs:
            std()
        assert str(mine.value).split("missing")[1] == str(theirs.value).split("missing")[1]

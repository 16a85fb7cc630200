"""The samples' own ``__init__`` (``estimators.samples.sample_type``) against the standard library's.

The reference is ``dataclasses.make_dataclass`` with ``frozen=True, slots=True`` over the same fields:
what ``@dataclass(frozen=True, slots=True)`` made before. Each sample kind must take the same
arguments, hold the same values, compare and hash as that, and stay frozen.
"""

from __future__ import annotations

import dataclasses
import inspect

import pytest

from estimators.samples import KIND_NAMES, Fix, sample_type


def _stdlib_twin(cls: type) -> type:
    """The same fields as a plain frozen dataclass with slots, made by the standard library alone."""
    spec = [(f.name, f.type, dataclasses.field(default=f.default)) if f.default is not dataclasses.MISSING
            else (f.name, f.type) for f in dataclasses.fields(cls)]
    return dataclasses.make_dataclass(cls.__name__, spec, frozen=True, slots=True)


def _arguments(cls: type) -> list[float]:
    return [float(i) + 0.5 for i, _ in enumerate(dataclasses.fields(cls))]


@pytest.mark.parametrize("cls", list(KIND_NAMES), ids=lambda c: c.__name__)
def test_a_sample_is_made_as_the_standard_library_makes_it(cls):
    twin = _stdlib_twin(cls)
    assert inspect.signature(cls) == inspect.signature(twin)
    args = _arguments(cls)
    ours, theirs = cls(*args), twin(*args)
    assert dataclasses.astuple(ours) == dataclasses.astuple(theirs)
    assert repr(ours).split("(", 1)[1] == repr(theirs).split("(", 1)[1]
    assert ours == cls(*args) and hash(ours) == hash(cls(*args))
    assert hash(ours) == hash(theirs)  # both hash the tuple of their fields
    by_name = cls(**{f.name: a for f, a in zip(dataclasses.fields(cls), args)})
    assert by_name == ours
    with pytest.raises(dataclasses.FrozenInstanceError):
        setattr(ours, dataclasses.fields(cls)[0].name, 1.0)
    with pytest.raises(TypeError):
        cls()  # its first field, the time, has no default


def test_defaults_and_replace_are_the_dataclass_ones():
    fix = Fix(1.0, 41.2, -32.5)
    assert (fix.sog_kn, fix.cog_deg, fix.hdop, fix.gnss_time_s) == (None, None, None, None)
    moved = dataclasses.replace(fix, sog_kn=5.6)
    assert moved == Fix(1.0, 41.2, -32.5, 5.6) and fix.sog_kn is None


def test_a_field_the_plain_init_cannot_make_is_refused():
    class WithFactory:
        __annotations__ = {"t_s": float, "seen": list}
        seen = dataclasses.field(default_factory=list)

    with pytest.raises(TypeError):
        sample_type(WithFactory)

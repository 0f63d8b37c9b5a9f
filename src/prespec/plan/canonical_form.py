"""The canonical form of a plan: which keys enter its fingerprint, declared per model.

Every model of the plan declares each of its fields, in its ``CANONICAL`` class attribute, as
one of three kinds:

- ``always``: written into the canonical form whatever its value. These are the keys the
  fingerprints of format 1 were first taken over; the set is closed (a test pins it).
- ``if_set``: written only when the value differs from the field's default. **Every key added
  from now on is of this kind**, so a plan that leaves it at its default keeps the fingerprint
  it had before the key existed. Its default, once released, never changes (a test pins it):
  a plan that leaves the key out is read back with that default.
- ``with_key``: written whenever the named sibling key is written, else only when set (the
  family keys: written in full on a family, left out of an ordinary hypothesis).

A field left undeclared, a declared name that is not a field, or an ``if_set`` field without a
default is a ``TypeError`` when the model class is made, so nobody adds a key without deciding.

The resolved plan that the lock stores *is* the canonical form (``model_dump(by_alias=True)``
writes it through :meth:`CanonicalModel._canonical`), and the fingerprint is the SHA-256 of its
RFC 8785 bytes. So ``prespec verify`` recomputes a stored version's fingerprint from the
stored plan alone, with no model of any version, and a lock written by an earlier prespec
verifies whatever a later one declares here.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from types import MappingProxyType
from typing import Any, ClassVar

from pydantic import BaseModel, SerializationInfo, model_serializer
from pydantic_core import PydanticUndefined


@dataclass(frozen=True)
class Canonical:
    """How each field of a model enters the canonical form (see the module's docstring)."""

    always: tuple[str, ...]
    if_set: tuple[str, ...] = ()
    with_key: Mapping[str, str] = field(default_factory=lambda: MappingProxyType({}))

    def adding(self, *, if_set: tuple[str, ...] = (),
               with_key: Mapping[str, str] | None = None) -> Canonical:
        """This declaration with keys added (for a subclass that adds fields)."""
        return replace(self, if_set=self.if_set + tuple(if_set),
                       with_key=MappingProxyType({**self.with_key, **(with_key or {})}))

    def names(self) -> list[str]:
        return [*self.always, *self.if_set, *self.with_key]


class CanonicalModel(BaseModel):
    """A plan model whose dump is its canonical form; subclasses with fields declare
    ``CANONICAL``, checked when the class is made."""

    CANONICAL: ClassVar[Canonical | None] = None

    @classmethod
    def __pydantic_init_subclass__(cls, **kwargs: Any) -> None:
        super().__pydantic_init_subclass__(**kwargs)
        check_declaration(cls)

    @model_serializer(mode="wrap")
    def _canonical(self, handler: Any, info: SerializationInfo) -> Any:
        """The dump without the ``if_set`` and ``with_key`` fields that stay unwritten."""
        out = handler(self)
        form = type(self).CANONICAL
        if form is None or not isinstance(out, dict):
            return out
        fields = type(self).model_fields
        by_alias = bool(info.by_alias)

        def key(name: str) -> str:
            alias = fields[name].serialization_alias or fields[name].alias
            return alias if by_alias and alias else name

        def drop(name: str) -> None:
            if getattr(self, name) == fields[name].get_default(call_default_factory=True):
                out.pop(key(name), None)

        for name in form.if_set:
            drop(name)
        for name, sibling in form.with_key.items():
            if key(sibling) not in out:
                drop(name)
        return out


def check_declaration(cls: type[BaseModel]) -> None:
    """Raise ``TypeError`` unless ``cls.CANONICAL`` declares each field of ``cls`` exactly
    once, names only fields, gives every ``if_set`` field a default, and ties ``with_key``
    fields to a sibling field."""
    fields = cls.model_fields
    form: Canonical | None = getattr(cls, "CANONICAL", None)
    if form is None:
        if fields:
            raise TypeError(f"{cls.__name__}: declare CANONICAL (prespec.plan.canonical_form): "
                            f"how each of {', '.join(fields)} enters the fingerprint")
        return
    names = form.names()
    where = f"{cls.__name__}.CANONICAL"
    for name in fields:
        if name not in names:
            raise TypeError(
                f"{cls.__name__}.{name}: not declared in {where}; a key added to the plan "
                "enters the fingerprint only when it differs from its default: add it to "
                "if_set (prespec.plan.canonical_form)")
    for name in names:
        if names.count(name) > 1:
            raise TypeError(f"{where}: {name} is declared more than once")
        if name not in fields:
            raise TypeError(f"{where}: {name} is not a field of {cls.__name__}")
    for name in (*form.if_set, *form.with_key):
        if fields[name].is_required():
            raise TypeError(f"{where}: {name} has no default, so it cannot be left out; "
                            "declare it in always")
    for name, sibling in form.with_key.items():
        if sibling not in fields or sibling in form.with_key:
            raise TypeError(f"{where}: {name} is written with {sibling!r}, which must be an "
                            "always or if_set field")


def default_of(model: type[BaseModel], name: str) -> Any:
    """The default of a field (what a plan that leaves an ``if_set`` key out means)."""
    value = model.model_fields[name].get_default(call_default_factory=True)
    return None if value is PydanticUndefined else value

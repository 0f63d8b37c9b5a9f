"""What the typed records prespec writes share: the base model, the JSON value types, and the
parts that both a results document and a log entry hold (a departure, a note, a data file).

``analysis/results.py`` declares ``results.json`` with them, ``audit/entries.py`` the entries of
the audit log. A record is checked strictly as it is written (an unknown key is refused) and
read leniently (:data:`LENIENT` in the validation context: an unknown key is ignored), so that
a file written by an earlier or a later prespec keeps loading.
"""

from __future__ import annotations

from typing import Annotated, Any

from pydantic import (
    BaseModel,
    ConfigDict,
    StrictBool,
    StrictFloat,
    StrictInt,
    StrictStr,
    ValidationError,
    ValidationInfo,
    WithJsonSchema,
    model_validator,
)

#: A JSON number as the writer produced it: an int stays an int and a float a float, so that a
#: record dumped through its model keeps its bytes.
Number = Annotated[StrictInt | StrictFloat, WithJsonSchema({"type": "number"})]
Count = Annotated[StrictInt, WithJsonSchema({"type": "integer", "minimum": 0})]
Text = StrictStr
Flag = StrictBool
#: ``[low, high]``; a limit that could not be computed is null
Interval = list[Number | None]

#: What the tags of a union of models begin with (they are not keys of the document).
TAG = "~"

#: The validation context key that reads a record leniently (unknown keys ignored).
LENIENT = "lenient"


#: The keys each model knows (aliases where given), computed once per model.
_KNOWN: dict[type, frozenset[str]] = {}


class Part(BaseModel):
    """A part of a record: unknown keys are refused as it is written; as it is read with
    ``context={LENIENT: True}``, the keys of an earlier or later prespec it does not know are
    dropped."""

    model_config = ConfigDict(extra="forbid", populate_by_name=True)

    @model_validator(mode="before")
    @classmethod
    def _known_keys_only(cls, data: Any, info: ValidationInfo) -> Any:
        if isinstance(data, dict) and info.context and info.context.get(LENIENT):
            known = _KNOWN.get(cls)
            if known is None:
                known = _KNOWN[cls] = frozenset(f.alias or name
                                                for name, f in cls.model_fields.items())
            if not known.issuperset(data):
                return {k: v for k, v in data.items() if k in known}
        return data

    def dumped(self) -> dict[str, Any]:
        """The JSON value: keys in declaration order (the writer's), keys never set left out."""
        return self.model_dump(mode="python", by_alias=True, exclude_unset=True)


class Departure(Part):
    """A departure from the plan (the codes: ``common/departures.py``): its code, in words,
    what the plan expected and what was found; ``accepted``: the --accept-deviation reason."""

    code: Text
    detail: Text
    expected: Text | None
    found: Text | None
    accepted: Text | None = None


class NoteEntry(Part):
    """Something the reader should know that is not a departure."""

    code: Text
    detail: Text


class DataFile(Part):
    """One file a glob read, relative to the plan's folder, with its SHA-256."""

    path: Text
    sha256: Text


def first_problem(exc: ValidationError) -> str:
    """The first problem of a failed validation in one line: ``hypotheses[0].p_value: Input
    should be a valid number``."""
    error = exc.errors(include_url=False)[0]
    where = ""
    for part in error["loc"]:
        if isinstance(part, int):
            where += f"[{part}]"
        elif not str(part).startswith(TAG):
            where += f".{part}" if where else str(part)
    return f"{where or '(the whole document)'}: {error['msg']}"


def draft_2020_12(schema: dict[str, Any], title: str) -> dict[str, Any]:
    """A model's JSON Schema as prespec prints it: draft 2020-12, with ``title``."""
    return {"$schema": "https://json-schema.org/draft/2020-12/schema", "title": title,
            **{k: v for k, v in schema.items() if k != "title"}}

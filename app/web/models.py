"""The request model of an analysis's options, shared by the JSON API and the dataset page's form.

The API validates a JSON body against :class:`AnalysisRequest` strictly: nothing is
coerced (``2.7`` or ``true`` is not a number of permutations; ``Infinity`` and ``1e400``,
which JSON parsers turn into infinity, are not numbers at all), and an unknown option is
an error. The form's values are text, so :meth:`AnalysisRequest.from_form` converts them
first and then builds the same model. Values of the right type are checked further by
:class:`pairlens.plan.AnalysisSettings` (known measures, a confidence below 1, ...).
"""

from __future__ import annotations

import json
from typing import Annotated, Any, Union

from pydantic import BaseModel, ConfigDict, Field, ValidationError

from .. import config

__all__ = ["AnalysisRequest", "ORDERED_FILE", "describe_errors", "validation_message"]

# The form's choice "rows in time order as in the file" (any other value names the column to sort by).
ORDERED_FILE = "(file order)"

_Names = Union[str, list[str]]


def _hint(text: str):
    return Field(default=None, description=text)


class AnalysisRequest(BaseModel):
    """The options of one analysis (docs/contracts.md, ``POST /api/datasets/{id}/analyses``).

    Every field is optional; a missing one takes the default of
    :class:`pairlens.plan.AnalysisSettings`. Each field's description is the message a
    client gets when the value has the wrong type.
    """

    model_config = ConfigDict(extra="forbid", strict=True, allow_inf_nan=False)

    measures: Annotated[_Names | None, _hint("a list of measure names or one comma-separated string")]
    columns: Annotated[_Names | None, _hint("a list of column names or one comma-separated string")]
    groups: Annotated[dict[str, _Names] | list[str] | None,
                      _hint("an object {name: [columns]} or a list of 'NAME=COL,COL' strings")]
    missing: Annotated[str | None, _hint("a string: 'pairwise' or 'complete'")]
    adjust: Annotated[str | None, _hint("a string naming the multiplicity adjustment, such as 'bh'")]
    confidence: Annotated[float | None, _hint("a finite number such as 0.95")]
    permutations: Annotated[int | None, _hint("a whole number")]
    seed: Annotated[int | None, _hint("a whole number")]
    tests: Annotated[dict[str, str] | _Names | None,
                     _hint("an object {measure: method} or a list of 'MEASURE=METHOD' strings")]
    ordered: Annotated[bool | str | None, _hint("true (rows in file order) or a column name")]
    difference: Annotated[bool | None, _hint("true or false")]
    categorical: Annotated[_Names | None, _hint("a list of column names")]
    numeric: Annotated[_Names | None, _hint("a list of column names")]
    given: Annotated[_Names | None, _hint("a list of column names")]

    def options(self) -> dict[str, Any]:
        """The options the client set, as keyword arguments of ``AnalysisSettings.from_options``."""
        return self.model_dump(exclude_unset=True)

    @classmethod
    def from_form(cls, form, all_columns: list[str]) -> "AnalysisRequest":
        """The same model from the dataset page's form, whose values are all text.

        Raises
        ------
        ValidationError
            A number field holds text that is not a number; :func:`describe_errors` words it.
        """
        columns = [str(c) for c in form.getlist("columns")]
        # per-column kind choices: "" keeps the detected kind
        kinds = {key[len("kind-"):]: str(value) for key, value in form.multi_items()
                 if key.startswith("kind-") and str(value) in ("numeric", "categorical")}
        ordered = str(form.get("ordered") or "")
        values = {
            "measures": [str(m) for m in form.getlist("measures")],
            "columns": None if set(columns) == set(all_columns) else columns,
            "groups": [line.strip() for line in str(form.get("groups", "")).splitlines() if line.strip()],
            "missing": str(form.get("missing") or config.DEFAULT_MISSING),
            "adjust": str(form.get("adjust") or config.DEFAULT_ADJUST),
            "confidence": _number(form.get("confidence"), float, config.DEFAULT_CONFIDENCE),
            "permutations": _number(form.get("permutations"), int, 0),
            "seed": _number(form.get("seed"), int, config.DEFAULT_SEED),
            "tests": [t for t in str(form.get("tests") or "").replace(",", " ").split() if t],
            # empty: rows independent; ORDERED_FILE: time order as in the file; else the column to sort by
            "ordered": None if not ordered else (True if ordered == ORDERED_FILE else ordered),
            "difference": form.get("difference") == "yes",
            "given": [str(c) for c in form.getlist("given") if str(c)],
            "categorical": [c for c, k in kinds.items() if k == "categorical"],
            "numeric": [c for c, k in kinds.items() if k == "numeric"],
        }
        # a number field's unparsable text stays text, so the model names the field
        return cls.model_validate(values)


def _number(text, kind, default):
    text = str(text or "").strip()
    if not text:
        return default
    try:
        return kind(text)
    except ValueError:
        return text


def _shown(value) -> str:
    text = json.dumps(value, allow_nan=True, default=str)
    return text if len(text) <= 60 else text[:57] + "..."


def describe_errors(errors: list[dict], body: Any = None) -> str:
    """One line for a client from pydantic's errors: each field named once, with what it must be.

    ``errors`` as from ``ValidationError.errors()`` or FastAPI's ``RequestValidationError``
    (whose locations start with ``"body"``). A field of :class:`AnalysisRequest` is described
    by its own hint and the value sent; an unknown option is named with the known ones.
    """
    fields = AnalysisRequest.model_fields
    parts: list[str] = []
    seen: set[str] = set()
    for error in errors:
        loc = [str(p) for p in error.get("loc", ())]
        in_body = not loc or loc[0] == "body"
        loc = loc[1:] if loc and loc[0] == "body" else loc
        key = loc[0] if in_body and loc else ".".join(loc)
        if key in seen:
            continue  # a union's other branches say the same thing again
        seen.add(key)
        if in_body and not loc and error.get("type") in _NOT_AN_OBJECT:
            parts.append("the options must be a JSON object")
        elif in_body and error.get("type") == "extra_forbidden":
            parts.append(f"{key}: unknown option; use {', '.join(fields)}")
        elif in_body and key in fields and isinstance(body, dict) and key in body:
            parts.append(f"{key}: must be {fields[key].description}, got {_shown(body[key])}")
        elif key:
            parts.append(f"{'.'.join(loc)}: {error.get('msg', 'invalid')}")
        else:
            parts.append(str(error.get("msg", "invalid")))
    return "; ".join(parts) or "invalid request"


_NOT_AN_OBJECT = ("model_type", "model_attributes_type", "dict_type")


def validation_message(exc: ValidationError, body: Any = None) -> str:
    """:func:`describe_errors` for the ``ValidationError`` of :meth:`AnalysisRequest.from_form`."""
    return describe_errors([e | {"loc": ("body", *e.get("loc", ()))} for e in exc.errors()], body)

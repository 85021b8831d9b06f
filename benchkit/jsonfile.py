"""Reading a JSON file benchkit wrote (or someone edited): one reader.

A damaged file must fail as a ``ValueError`` that the caller turns into a
sentence, whatever is wrong with it: not UTF-8, not JSON, or nested so
deep that the parser would recurse past Python's limit (a hostile or
corrupted file of a few hundred kilobytes does it). A missing file stays
``FileNotFoundError``: callers decide what a missing file means.
"""

from __future__ import annotations

import dataclasses
import json
import math
import os
import typing
from pathlib import Path


def load_json(path: str | os.PathLike):
    """The document in ``path``; ValueError when it cannot be read as JSON."""
    return loads(Path(path).read_text(encoding="utf-8"))


def loads(text: str):
    """:func:`load_json` of text already read."""
    try:
        return json.loads(text)
    except RecursionError:
        raise ValueError("nested too deeply to be a benchkit file") from None


_WORDS = {float: "a number", int: "a whole number", str: "text", bool: "true or false", dict: "an object", list: "a list"}


def _fits(value, kind) -> bool:
    if kind is float:
        return isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)
    if kind is int:
        return isinstance(value, int) and not isinstance(value, bool)
    return isinstance(value, kind)


def typed(cls, doc: dict):
    """The dataclass ``cls`` built from the fields of ``doc`` it declares,
    each checked against its annotation (float, int, str, bool, dict,
    list, an optional one of them, or a nested dataclass); ValueError
    names the first field of the wrong type."""
    hints = typing.get_type_hints(cls)
    values = {}
    for f in dataclasses.fields(cls):
        if f.name not in doc:
            continue
        value, kind = doc[f.name], hints[f.name]
        args = [a for a in typing.get_args(kind) if a is not type(None)]
        optional = type(None) in typing.get_args(kind)
        if optional:
            kind = args[0]
        if value is None and optional:
            values[f.name] = None
        elif dataclasses.is_dataclass(kind):
            if not isinstance(value, dict):
                raise ValueError(f"field {f.name!r} should be an object, got {value!r:.40}")
            values[f.name] = typed(kind, value)
        else:
            base = typing.get_origin(kind) or kind
            if not _fits(value, base):
                raise ValueError(f"field {f.name!r} should be {_WORDS.get(base, base.__name__)}, got {value!r:.40}")
            values[f.name] = value  # as written (an int stays one: the profile's digest is of what it holds)
    return cls(**values)


#: field kinds for :func:`wrong_field` (add None where a field may be null)
NUMBER, INT, TEXT = (int, float), (int,), (str,)


def wrong_field(doc: dict, fields: dict, where: str = "") -> str | None:
    """The first field of ``doc`` whose value is not of its kinds in
    ``fields`` (a tuple of types, with None where null is allowed; a bool
    is a number only where bool is listed), said as "<where>key is <value>";
    None when all fit. Fields ``doc`` lacks are not judged."""
    for key, kinds in fields.items():
        if key not in doc:
            continue
        v = doc[key]
        if v is None:
            ok = None in kinds
        else:
            ok = isinstance(v, tuple(k for k in kinds if k is not None)) and (bool in kinds or not isinstance(v, bool))
        if not ok:
            return f"{where}{key} is {v!r:.30}"
    return None

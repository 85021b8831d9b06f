"""Result documents: the one envelope every result is stored and printed in.

A result's document names its kind (the kind's one name: the command that
makes it and its run record's ``command`` alike) and the schema version,
then its figures, units in every key. Version 2 gave every kind its one
name and every load its unit; :func:`upgrade` reads a version-1 document
(a bench folder from before) as version 2, so old runs still list,
reanalyse and compare.
"""

from __future__ import annotations

#: The version of every result document.
RESULT_VERSION = 2

#: Version-1 result kinds under their one name since version 2.
V1_KINDS = {"tone-steps": "tone", "response": "sweep", "output-impedance": "zout"}
#: Version-1 keys with their unit since version 2.
V1_KEYS = {"load_ohm": "load_ohms"}


def document(kind: str, fields: dict) -> dict:
    """The document of a result of ``kind``: its kind, the schema version,
    then ``fields``."""
    return {"kind": kind, "schema_version": RESULT_VERSION, **fields}


def upgrade(doc: dict) -> dict:
    """A stored result document as version 2 (a version-2 one unchanged)."""
    if not isinstance(doc, dict) or doc.get("schema_version", 1) != 1:
        return doc
    out = {V1_KEYS.get(k, k): v for k, v in doc.items()}
    out["kind"] = V1_KINDS.get(doc.get("kind"), doc.get("kind"))
    out["schema_version"] = RESULT_VERSION
    return out

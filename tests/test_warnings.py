"""Warnings carry codes: one list of codes, documented, the same shape in
every document, and version-1 texts still read.

Plumbing only: no measured figure is checked here, so no outside source
is named; the figures a warning speaks of are checked against their
sources in the measurement tests."""

from __future__ import annotations

import copy
import pickle
import re
from pathlib import Path

import pytest

from benchkit.analysis.documents import document, upgrade
from benchkit.analysis.tone import analyze_tone
from benchkit.errors import BenchWarning, read_warnings, WARNING_CODES

from conftest import cosine

DOCS = Path(__file__).resolve().parents[1] / "docs" / "results-json.md"


def test_every_code_is_documented_with_its_meaning():
    table = DOCS.read_text().split("| code | meaning |", 1)[1].split("\n\n", 1)[0]
    rows = dict(re.findall(r"^\| `([a-z-]+)` \| (.+) \|$", table, re.M))
    assert {k: rows.get(k) for k in WARNING_CODES} == WARNING_CODES


def test_an_unknown_code_is_refused():
    with pytest.raises(ValueError, match="unknown warning code"):
        BenchWarning("no-such-code", "text")


def test_a_warning_is_its_text_and_keeps_its_code():
    w = BenchWarning("dropout", "a stream fault spoiled this step")
    assert w == "a stream fault spoiled this step" and "spoiled" in w
    for again in (pickle.loads(pickle.dumps(w)), copy.deepcopy(w), BenchWarning.read(w.to_dict())):
        assert again == w and again.code == "dropout"


def test_an_analysis_warning_reaches_its_document_with_its_code():
    # a sine at 0.5 FS whose top is cut at 0.3 FS: the input clipped
    x = cosine(997.0, 48000.0, amp=0.5).clip(-0.3, 0.3) / 0.3
    result = analyze_tone(x, 48000.0)
    assert not result.valid
    doc = result.to_dict()
    assert any(w["code"] == "input-clipped" and w["text"] == str(r) for w, r in zip(doc["warnings"], result.warnings))
    assert all(set(w) == {"code", "text"} for w in doc["warnings"])


def test_version_1_texts_read_as_unclassified():
    v1 = {"kind": "tone-steps", "schema_version": 1, "warnings": ["old words"],
          "steps": [{"drive_dbfs": -20.0, "warnings": ["older words"]}]}
    doc = upgrade(v1)
    assert doc["warnings"] == [{"code": "unclassified", "text": "old words"}]
    assert doc["steps"][0]["warnings"] == [{"code": "unclassified", "text": "older words"}]
    assert [w.code for w in read_warnings(document("tone", {"warnings": ["plain"]})["warnings"])] == ["unclassified"]

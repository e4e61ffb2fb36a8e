"""Examples in the documents are run, so they cannot go stale."""

from __future__ import annotations

import os
import re
from pathlib import Path

import pytest

ROOT = Path(__file__).parent.parent


@pytest.mark.parametrize("document", ["README.md"])
def test_python_examples_run(document, monkeypatch):
    blocks = re.findall(r"```python\n(.*?)```", (ROOT / document).read_text(), re.S)
    assert blocks
    monkeypatch.chdir(ROOT)
    for code in blocks:
        exec(compile(code, document, "exec"), {})
    assert os.getcwd() == str(ROOT)


def test_the_key_tables_of_the_workflow_document_are_the_schema_s():
    """docs/workflow.md's key tables are generated from the schema (every key, its unit, default and
    meaning); a key added to a stage kind without regenerating them fails here.
    Regenerate with: python -m pipeline.flow.keys docs/workflow.md"""
    from pipeline.flow import keys

    text = (ROOT / "docs" / "workflow.md").read_text()
    sections = {m.group("section") for m in keys.MARKER.finditer(text)}
    assert sections == set(keys.tables()), "every stage kind has a key table in docs/workflow.md"
    assert keys.rewrite(text) == text, "run: python -m pipeline.flow.keys docs/workflow.md"
    for key in ("`adiabatic`", "`memory_limit`", "`convection.SURFACE.reference_difference`"):
        assert key in text

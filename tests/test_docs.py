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

"""The README's Python example runs as written (from the repository root, on the bundled sample)."""

from __future__ import annotations

import os
import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_readme_python_example_runs(monkeypatch):
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    section = text[text.index("## Python"):]  # the library example (the workbench example needs a notebook)
    blocks = re.findall(r"```python\n(.*?)```", section, flags=re.S)[:1]
    assert blocks, "the README has no Python example"
    monkeypatch.chdir(ROOT)
    namespace: dict = {}
    for block in blocks:
        exec(compile(block, "README.md", "exec"), namespace)  # noqa: S102 - the project's own README
    records = namespace["records"]  # the sizing example finds the sample's laminations
    assert len(records) >= 1 and records[0].length_scan_mm > 0
    assert os.getcwd() == str(ROOT)

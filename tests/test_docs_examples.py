"""The Python examples in README.md and docs/*.md run as written (on the example study)."""

from __future__ import annotations

import re
import shutil
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
BLOCK = re.compile(r"```python\n(.*?)```", re.S)


def _blocks():
    out = []
    # docs/experiment-file.md has its own, stronger test in test_experiment.py
    docs = [d for d in sorted((ROOT / "docs").glob("*.md")) if d.name != "experiment-file.md"]
    for doc in [ROOT / "README.md", *docs]:
        for i, code in enumerate(BLOCK.findall(doc.read_text(encoding="utf-8"))):
            out.append(pytest.param(code, id=f"{doc.name}-{i}"))
    return out


@pytest.mark.parametrize("code", _blocks())
def test_python_example_runs(code, tmp_path, monkeypatch, capsys):
    """Each example runs and shows its result: what it prints holds numbers and none is
    NaN, and every file it writes is non-empty (a PDF starts with its signature)."""
    for p in (ROOT / "example_data").iterdir():
        shutil.copy(p, tmp_path / p.name)
    before = {p.name for p in tmp_path.iterdir()}
    monkeypatch.chdir(tmp_path)
    exec(compile(code, "<docs example>", "exec"), {"__name__": "__docs__"})
    printed = capsys.readouterr().out
    written = [p for p in tmp_path.iterdir() if p.name not in before]
    assert printed or written, "the example neither prints nor writes anything"
    if printed:
        assert re.search(r"\d", printed) and "nan" not in printed.lower(), printed
    for p in written:
        assert p.stat().st_size > 0, p.name
        if p.suffix == ".pdf":
            assert p.read_bytes().startswith(b"%PDF-"), p.name

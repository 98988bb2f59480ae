"""Helpers for batch-chain tests: a simulated demo study in a temporary folder, edited."""

from __future__ import annotations

import re
from pathlib import Path

from uqreport.demo import DemoScenario, write_demo


def demo_study(directory: Path, *, seed: int = 7, scenario: DemoScenario | None = None) -> Path:
    """Write the invented demo study into ``directory``; returns the experiment file."""
    write_demo(directory, seed=seed, scenario=scenario)
    return directory / "experiment.toml"


def edit_toml(path: Path, old: str, new: str, *, count: int = 1) -> None:
    """Replace ``old`` by ``new`` in the experiment file (must occur)."""
    text = path.read_text(encoding="utf-8")
    if old not in text:
        raise AssertionError(f"{old!r} not in {path.name}")
    path.write_text(text.replace(old, new, count), encoding="utf-8")


def set_batch_option(path: Path, key: str, value: str) -> None:
    """Set ``key = value`` in the [batch] table (value as TOML text)."""
    text = path.read_text(encoding="utf-8")
    pattern = re.compile(rf"^(\[batch\]\n(?:(?!\[).*\n)*?){key} = .*\n", re.M)
    if pattern.search(text):
        text = pattern.sub(lambda m: f"{m.group(1)}{key} = {value}\n", text, count=1)
    else:
        text = text.replace("[batch]\n", f"[batch]\n{key} = {value}\n", 1)
    path.write_text(text, encoding="utf-8")


def edit_table(path: Path, fn) -> None:
    """Rewrite the data lines of a CSV table: ``fn(list of row lists) -> list of row lists``."""
    lines = path.read_text(encoding="utf-8").splitlines()
    head = [ln for ln in lines if ln.startswith("#")]
    header = next(ln for ln in lines if not ln.startswith("#"))
    rows = [ln.split(",") for ln in lines[len(head) + 1 :] if ln.strip()]
    rows = fn(rows)
    path.write_text(
        "\n".join([*head, header, *(",".join(r) for r in rows)]) + "\n", encoding="utf-8"
    )

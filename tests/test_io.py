"""Atomic writes: the whole file or nothing, with an ordinary file mode."""

from __future__ import annotations

import os

import pytest

from uqreport.io import atomic_write_bytes, atomic_write_text


def test_atomic_write_replaces_and_uses_the_umask(tmp_path):
    target = tmp_path / "out.txt"
    target.write_text("old")
    atomic_write_text(target, "new µ")
    assert target.read_text(encoding="utf-8") == "new µ"
    mask = os.umask(0)
    os.umask(mask)
    assert os.stat(target).st_mode & 0o777 == 0o666 & ~mask
    assert [p.name for p in tmp_path.iterdir()] == ["out.txt"]


def test_failed_write_leaves_the_old_file_and_no_temporary(tmp_path, monkeypatch):
    target = tmp_path / "out.bin"
    target.write_bytes(b"old")

    def fail(*args, **kwargs):
        raise OSError("disk full (simulated)")

    monkeypatch.setattr(os, "replace", fail)
    with pytest.raises(OSError, match="disk full"):
        atomic_write_bytes(target, b"new")
    assert target.read_bytes() == b"old"
    assert [p.name for p in tmp_path.iterdir()] == ["out.bin"]

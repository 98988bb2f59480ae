"""Findings: the outcomes of the checks a chain runs (warnings and notes for the report)."""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["Finding"]


@dataclass(frozen=True)
class Finding:
    """A check's outcome: ``level`` "warning" (changes how a number should be read) or
    "note" (an assumption stated), the ``check`` name, the ``run`` it is about, and text."""

    level: str
    check: str
    message: str
    run: str | None = None

    def as_dict(self) -> dict[str, str | None]:
        return {"level": self.level, "check": self.check, "run": self.run, "message": self.message}

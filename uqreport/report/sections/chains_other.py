"""A short note for chains in the document that no section module describes yet."""

from __future__ import annotations

from .. import pdf
from ..registry import ReportContext, Section, register_section, registered_sections

__all__ = ["build_other_chains"]


def build_other_chains(ctx: ReportContext) -> list:
    covered = {s.chain for s in registered_sections() if s.chain}
    other = [c for c in ctx.doc.get("chains", {}) if c not in covered]
    if not other:
        return []
    return [
        pdf.para(
            "These chains have no section of their own in this version of the report; their"
            " numbers are in results.json and in the comparison, budget and appendix sections: "
            + ", ".join(other)
            + "."
        )
    ]


register_section(Section("chains:other", "Other chains", 39, build_other_chains))

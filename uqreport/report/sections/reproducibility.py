"""The reproducibility appendix: versions, settings, seed, command line and the SHA-256 of
every input file, from ``doc["provenance"]``."""

from __future__ import annotations

import shlex

from .. import fmt, pdf
from ..registry import ReportContext, Section, register_section

__all__ = ["build_reproducibility"]


def build_reproducibility(ctx: ReportContext) -> list:
    s = pdf.styles()
    prov = ctx.doc.get("provenance") or {}
    settings = ctx.doc.get("settings") or {}
    out: list = [
        pdf.para(
            "The same experiment file, tables, settings and seed give the same numbers. What"
            " follows identifies them; results.json holds them in machine-readable form"
            f" (schema {ctx.doc.get('schema', '–')})."
        )
    ]
    cl = prov.get("command_line")
    if cl:
        text = shlex.join(str(a) for a in cl) if isinstance(cl, list) else str(cl)
        out += [pdf.para("Command line", s.h3), pdf.para(text, s.mono)]
    rows = [[str(k), "–" if v is None else str(v)] for k, v in settings.items()]
    if prov.get("seed") is not None and "seed" not in settings:
        rows.append(["seed", str(prov["seed"])])
    for chain, ch in (ctx.doc.get("chains") or {}).items():
        mc = ch.get("montecarlo")
        if mc:
            rows.append(
                [
                    f"Monte Carlo, {chain}",
                    f"{fmt.fmt_count(mc.get('draws', 0))} draws, adaptive"
                    f" {'yes' if mc.get('adaptive') else 'no'}, converged"
                    f" {'yes' if mc.get('converged') else 'no'}, failed draws"
                    f" {mc.get('failed_draws', 0)}",
                ]
            )
        b = ch.get("bayes")
        if b and (b.get("settings") or {}).get("seed") is not None:
            rows.append([f"MCMC seed, {chain}", str(b["settings"]["seed"])])
    if rows:
        out += pdf.titled(
            "Settings",
            pdf.data_table(["Setting", "Value"], rows, widths=[1.6, 4.4]),
        )
    versions = prov.get("versions") or {}
    if versions:
        out += pdf.titled(
            "Software versions",
            pdf.data_table(
                ["Package", "Version"],
                [[str(k), str(v)] for k, v in versions.items()],
                widths=[1.6, 4.4],
            ),
            f"Report fonts: {s.fonts.description}.",
        )
    files = prov.get("files") or {}
    if files:
        exp = prov.get("experiment")
        out += pdf.titled(
            "Input files (SHA-256)",
            pdf.data_table(
                ["File", "SHA-256"],
                [
                    [
                        pdf.Markup(pdf.esc(k) + (" <i>(experiment file)</i>" if k == exp else "")),
                        pdf.para(str(v), s.mono),
                    ]
                    for k, v in files.items()
                ],
                widths=[1.6, 4.4],
            ),
            "Check a file with: sha256sum FILE (or shasum -a 256 FILE).",
        )
    return out


register_section(
    Section("reproducibility", "Reproducibility", 90, build_reproducibility, new_page=True)
)

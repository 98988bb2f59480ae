"""Parser for the NIST StRD regression files kept in ``tests/data/strd``.

Every number a test compares against comes out of the files through :func:`parse_strd`; none
is retyped.  The parser reads the line ranges each file states in its header ("Certified
Values (lines A to B)", "Data (lines A to B)", and for nonlinear sets "Starting Values") and
checks what it reads against the header ("N Observations", the data column count), so that a
damaged file fails loudly instead of giving a wrong reference.

Quirks of the originals handled here (see ``tests/data/strd/README.md``): the parameter count
is taken from the rows of the certified table, not from the "N Parameters (...)" line (wrong
in Longley); the dataset name is read from the "Dataset Name:" line without relying on the
"(name.dat)" suffix (missing in Pontius); only the stated data range is read (Norris has a
whitespace-only line after it); the stated degrees of freedom are kept as printed
(``dof_stated``; wrong in Rat43) next to ``n - p``.
"""

from __future__ import annotations

import hashlib
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from numpy.typing import NDArray

__all__ = ["DATA_DIR", "StrdDataset", "agreeing_digits", "check_sha256sums", "parse_strd"]

DATA_DIR = Path(__file__).resolve().parent / "data" / "strd"

_NUM = r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[Ee][-+]?\d+)?"
_RANGE = re.compile(
    r"^\s*(?:File Format:\s*ASCII)?\s*([A-Za-z ]+?)\s*\(lines\s+(\d+)\s+to\s+(\d+)\)"
)
_LINEAR_ROW = re.compile(rf"^\s*(B\d+)\s+({_NUM})\s+({_NUM})\s*$")
_NONLINEAR_ROW = re.compile(rf"^\s*(b\d+)\s*=\s*({_NUM})\s+({_NUM})\s+({_NUM})\s+({_NUM})\s*$")
_RESIDUAL_SD = re.compile(rf"Standard Deviation:?\s+({_NUM})\s*$")
_RSS_NONLINEAR = re.compile(rf"^\s*Residual Sum of Squares:\s+({_NUM})\s*$")
_DOF_NONLINEAR = re.compile(r"^\s*Degrees of Freedom:\s+(\d+)\s*$")
_ANOVA_RESIDUAL = re.compile(rf"^\s*Residual\s+(\d+)\s+({_NUM})\s+({_NUM})\s*$")


@dataclass(frozen=True)
class StrdDataset:
    """One parsed StRD file.

    Attributes
    ----------
    name:
        Dataset name from the "Dataset Name:" line, e.g. ``"Longley"``.
    kind:
        ``"linear"`` or ``"nonlinear"`` (from the "Procedure:" line).
    y:
        Response, shape (n,).
    x:
        Predictors, shape (n, k) (k = 1 for all the single-predictor sets).
    param_names:
        Parameter names in file order (``B0, B1, ...`` or ``b1, b2, ...``).
    certified_params, certified_sd:
        Certified parameter values and certified standard deviations, shape (p,).
    residual_sd:
        Certified residual standard deviation.
    rss:
        Certified residual sum of squares (the ANOVA "Residual" row for linear sets).
    dof_stated:
        Residual degrees of freedom as printed in the file (not always n - p; see Rat43).
    start1, start2:
        Starting vectors of the nonlinear sets, shape (p,); ``None`` for linear sets.
    """

    name: str
    kind: str
    y: NDArray[np.float64]
    x: NDArray[np.float64]
    param_names: tuple[str, ...]
    certified_params: NDArray[np.float64]
    certified_sd: NDArray[np.float64]
    residual_sd: float
    rss: float
    dof_stated: int
    start1: NDArray[np.float64] | None
    start2: NDArray[np.float64] | None

    @property
    def n(self) -> int:
        """Number of observations."""
        return int(self.y.size)

    @property
    def p(self) -> int:
        """Number of parameters."""
        return len(self.param_names)


class StrdFormatError(ValueError):
    """The file does not look like an StRD regression file."""


def _ranges(lines: list[str]) -> dict[str, tuple[int, int]]:
    """The "(lines A to B)" ranges of the header, as 0-based half-open slices."""
    out: dict[str, tuple[int, int]] = {}
    for line in lines[:12]:
        m = _RANGE.match(line)
        if m:
            out[m.group(1).strip()] = (int(m.group(2)) - 1, int(m.group(3)))
    return out


def _header_int(lines: list[str], pattern: str, path: Path) -> int:
    for line in lines:
        m = re.search(pattern, line)
        if m:
            return int(m.group(1))
    raise StrdFormatError(f"{path.name}: no line matching {pattern!r} in the header")


def parse_strd(path: str | Path) -> StrdDataset:
    """Parse one StRD regression file (``path`` may be a bare name such as ``"Norris"``)."""
    path = Path(path)
    if not path.suffix:
        path = DATA_DIR / f"{path.name}.dat"
    lines = path.read_text(encoding="ascii").splitlines()
    ranges = _ranges(lines)
    if "Certified Values" not in ranges or "Data" not in ranges:
        raise StrdFormatError(f"{path.name}: header line ranges not found ({ranges})")

    m = re.match(r"^Dataset Name:\s+(\S+)", lines[1])
    if not m:
        raise StrdFormatError(f"{path.name}: line 2 is not a 'Dataset Name:' line")
    name = m.group(1)
    procedure = next(line for line in lines if line.startswith("Procedure:"))
    kind = "nonlinear" if "Nonlinear" in procedure else "linear"

    c0, c1 = ranges["Certified Values"]
    cert_lines = lines[c0:c1]
    names: list[str] = []
    values: list[float] = []
    sds: list[float] = []
    starts: list[tuple[float, float]] = []
    residual_sd = rss = float("nan")
    dof = -1
    row_re = _NONLINEAR_ROW if kind == "nonlinear" else _LINEAR_ROW
    for line in cert_lines:
        if m := row_re.match(line):
            names.append(m.group(1))
            nums = [float(g) for g in m.groups()[1:]]
            if kind == "nonlinear":
                starts.append((nums[0], nums[1]))
            values.append(nums[-2])
            sds.append(nums[-1])
        elif m := _RESIDUAL_SD.search(line):
            residual_sd = float(m.group(1))
        elif m := _RSS_NONLINEAR.match(line):
            rss = float(m.group(1))
        elif m := _DOF_NONLINEAR.match(line):
            dof = int(m.group(1))
        elif m := _ANOVA_RESIDUAL.match(line):
            dof, rss = int(m.group(1)), float(m.group(2))
    if not names or np.isnan(residual_sd) or np.isnan(rss) or dof < 0:
        raise StrdFormatError(f"{path.name}: incomplete certified values in lines {c0 + 1}-{c1}")

    if kind == "nonlinear":
        s0, s1 = ranges.get("Starting Values", (c0, c0))
        if s1 - s0 != len(names):
            raise StrdFormatError(f"{path.name}: starting-value range does not match parameters")

    d0, d1 = ranges["Data"]
    rows = []
    for k, line in enumerate(lines[d0:d1], start=d0 + 1):
        fields = line.split()
        if not fields:
            raise StrdFormatError(f"{path.name}: blank line {k} inside the data range")
        rows.append([float(f) for f in fields])
    data = np.array(rows, dtype=np.float64)
    n_obs = _header_int(lines, r"^\s*(?:Data:)?\s*(\d+)\s+Observations", path)
    n_pred = _header_int(lines, r"(\d+)\s+Predictor", path)
    if data.shape != (n_obs, 1 + n_pred):
        raise StrdFormatError(
            f"{path.name}: data block has shape {data.shape}, header says {n_obs} observations"
            f" of 1 response and {n_pred} predictor(s)"
        )
    if any(line.strip() for line in lines[d1:]):
        raise StrdFormatError(f"{path.name}: non-blank lines after the stated data range")

    start = np.array(starts, dtype=np.float64) if starts else None
    return StrdDataset(
        name=name,
        kind=kind,
        y=data[:, 0].copy(),
        x=data[:, 1:].copy(),
        param_names=tuple(names),
        certified_params=np.array(values),
        certified_sd=np.array(sds),
        residual_sd=residual_sd,
        rss=rss,
        dof_stated=dof,
        start1=None if start is None else start[:, 0].copy(),
        start2=None if start is None else start[:, 1].copy(),
    )


def agreeing_digits(estimate: object, certified: object, *, cap: float = 15.0) -> NDArray:
    """Number of agreeing significant digits, -log10(|est - cert| / |cert|), capped at ``cap``.

    This is the log relative error used to score results against the StRD certified values;
    an exact match scores ``cap``.
    """
    est = np.asarray(estimate, dtype=np.float64)
    cert = np.asarray(certified, dtype=np.float64)
    rel = np.abs(est - cert) / np.abs(cert)
    with np.errstate(divide="ignore"):
        lre = -np.log10(rel)
    return np.minimum(lre, cap)


def check_sha256sums(folder: Path = DATA_DIR) -> dict[str, bool]:
    """Check the files listed in ``folder/SHA256SUMS``; map each file name to pass/fail."""
    out: dict[str, bool] = {}
    for line in (folder / "SHA256SUMS").read_text(encoding="ascii").splitlines():
        if not line.strip():
            continue
        digest, fname = line.split(maxsplit=1)
        fname = fname.lstrip("*").strip()
        actual = hashlib.sha256((folder / fname).read_bytes()).hexdigest()
        out[fname] = actual == digest
    return out

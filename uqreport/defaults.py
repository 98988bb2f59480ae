"""Type B defaults used when an experiment file leaves a value out, each with its source.

Every default is a small frozen :class:`TypeBDefault` record: the value, its unit, how its
uncertainty is stated (a standard uncertainty ``u`` or a half-width with a bounded
distribution) and a ``source`` string that the report prints next to the number.  A default
is an assumption about typical equipment, not a measurement: the report lists every default a
study relied on, so that it can be replaced by the study's own value.

Graduated cylinders: ASTM E1272-02, Table 1 ("Tolerances to contain or to deliver", mL).  The
standard's tolerance is a limit, read here as the half-width of a rectangular distribution
(GUM 4.3.7).  A capacity not in the table has no default: give the tolerance.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from .errors import InputError

__all__ = [
    "CUVETTE_PATHLENGTH",
    "GRADUATED_CYLINDER_SOURCE",
    "GRADUATED_CYLINDER_TOLERANCES",
    "LINEAR_ABSORBANCE_LIMIT",
    "MANUAL_TIMING",
    "NOISE_FLOOR",
    "NOISE_RELATIVE",
    "NOISE_SD",
    "OPERATOR_BIAS",
    "PHOTOMETRIC_ACCURACY",
    "STOPWATCH_RESOLUTION",
    "TypeBDefault",
    "graduated_cylinder_tolerance",
]


@dataclass(frozen=True)
class TypeBDefault:
    """A default value with the statement of its uncertainty and where it comes from.

    Attributes
    ----------
    name:
        What the default is for, in plain words (e.g. ``"manual start-stop timing"``).
    value:
        The default estimate, in ``unit`` (0 for an offset-type default).
    unit:
        The unit of ``value``, ``u`` and ``half_width`` (a :mod:`uqreport.units` spelling).
    u:
        The standard uncertainty, when the default is stated that way (else ``None``).
    half_width:
        The half-width of a bounded distribution, when the default is a tolerance (else
        ``None``).
    distribution:
        ``"normal"`` when ``u`` is given, ``"rectangular"`` for a tolerance.
    source:
        Where the number comes from, as printed in reports.
    """

    name: str
    value: float
    unit: str
    u: float | None = None
    half_width: float | None = None
    distribution: str = "normal"
    source: str = ""

    @property
    def standard_uncertainty(self) -> float:
        """The standard uncertainty implied by ``u`` or by the half-width (a/sqrt(3))."""
        if self.u is not None:
            return self.u
        if self.half_width is not None:
            divisor = {"rectangular": math.sqrt(3.0), "triangular": math.sqrt(6.0)}.get(
                self.distribution, math.sqrt(2.0)
            )
            return self.half_width / divisor
        return 0.0


#: Manual timing of one start-and-stop interval: about N(0, (0.10 s)^2).
MANUAL_TIMING = TypeBDefault(
    name="manual start-stop timing of one interval",
    value=0.0,
    unit="s",
    u=0.10,
    source="Am. J. Phys. 87(2), 110 (2019), manual timing study",
)

#: A bias shared by every interval one operator times (reaction time at start vs stop).
OPERATOR_BIAS = TypeBDefault(
    name="operator timing bias shared by all intervals",
    value=0.0,
    unit="s",
    u=0.05,
    source="uqreport assumption (about half the start-stop scatter); no published source,"
    " replace it with your own estimate",
)

#: Display resolution of a hand-held stopwatch.
STOPWATCH_RESOLUTION = TypeBDefault(
    name="stopwatch display resolution",
    value=0.01,
    unit="s",
    source="typical hand-held stopwatch display (common practice)",
)

#: Photometric accuracy of a bench spectrophotometer below 1 A.
PHOTOMETRIC_ACCURACY = TypeBDefault(
    name="photometric accuracy below 1 A",
    value=0.0,
    unit="1",
    half_width=0.005,
    distribution="rectangular",
    source="+/-0.005 A below 1 A, a typical acceptance criterion (common practice)",
)

#: Standard deviation of one absorbance reading.
NOISE_SD = TypeBDefault(
    name="absorbance reading noise (SD of one reading)",
    value=0.002,
    unit="1",
    source="typical bench spectrophotometer (common practice)",
)

#: Proportional part of the reading noise.
NOISE_RELATIVE = TypeBDefault(
    name="proportional part of the reading noise",
    value=0.0,
    unit="1",
    source="none assumed (constant noise)",
)

#: Upper end of the range where absorbance is taken as linear in concentration.
LINEAR_ABSORBANCE_LIMIT = TypeBDefault(
    name="upper limit of the linear absorbance range",
    value=1.0,
    unit="1",
    source="Chem. Educator 4 (1999) 81 (linear range of bench spectrophotometers about 1 A)",
)

#: Absorbance below which readings carry little information about the decay.
NOISE_FLOOR = TypeBDefault(
    name="absorbance noise floor",
    value=0.02,
    unit="1",
    source="about ten times the default reading noise (common practice)",
)

#: Pathlength of a reference quartz cuvette (suggested in messages; pathlength is required).
CUVETTE_PATHLENGTH = TypeBDefault(
    name="reference cuvette pathlength",
    value=10.0,
    unit="mm",
    half_width=0.03,
    distribution="rectangular",
    source="NBS/NIST SRM 932 certificate description: nominal pathlength 10 mm +/- 0.03 mm",
)

GRADUATED_CYLINDER_SOURCE = "ASTM E1272-02 Table 1"

#: Tolerances (mL, to contain or to deliver) of graduated cylinders by capacity (mL):
#: (class A, class B).  Class B is twice class A (ASTM E1272-02, 1.1.2).
GRADUATED_CYLINDER_TOLERANCES: dict[float, tuple[float, float]] = {
    5.0: (0.05, 0.10),
    10.0: (0.10, 0.20),
    25.0: (0.17, 0.34),
    50.0: (0.25, 0.50),
    100.0: (0.50, 1.00),
    250.0: (1.00, 2.00),
    500.0: (2.00, 4.00),
}


def graduated_cylinder_tolerance(capacity_ml: float, glass_class: str) -> TypeBDefault:
    """The tolerance of a graduated cylinder of ``capacity_ml`` mL and class ``"A"``/``"B"``.

    Returns a rectangular :class:`TypeBDefault` (value 0, half-width = tolerance, in mL).
    Raises :class:`InputError` for a capacity the table does not list or an unknown class.
    """
    cls = str(glass_class).strip().upper()
    if cls not in ("A", "B"):
        raise InputError(
            f"glassware class '{glass_class}' is not 'A' or 'B'. Fix: write class = \"A\" or"
            ' class = "B", or give the tolerance.'
        )
    cap = float(capacity_ml)
    for listed, (tol_a, tol_b) in GRADUATED_CYLINDER_TOLERANCES.items():
        if math.isclose(cap, listed, rel_tol=1e-9, abs_tol=1e-9):
            tol = tol_a if cls == "A" else tol_b
            return TypeBDefault(
                name=f"graduated cylinder {listed:g} mL class {cls}",
                value=0.0,
                unit="mL",
                half_width=tol,
                distribution="rectangular",
                source=f"{GRADUATED_CYLINDER_SOURCE}, {listed:g} mL, class {cls}: +/-{tol:.2f} mL",
            )
    listed_text = ", ".join(f"{c:g}" for c in GRADUATED_CYLINDER_TOLERANCES)
    raise InputError(
        f"no tabulated tolerance for a {cap:g} mL graduated cylinder"
        f" ({GRADUATED_CYLINDER_SOURCE} lists {listed_text} mL)."
        ' Fix: give the tolerance, e.g. tolerance = { half_width = 0.5, unit = "mL",'
        ' source = "marking on the cylinder" }.'
    )

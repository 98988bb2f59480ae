"""The general sections of an experiment file: study, chemistry, instrument, glassware, timing,
solutions and correlations.

Each section is a frozen dataclass plus a :class:`~uqreport.experiment.schema.RecordSpec`
registered with :func:`~uqreport.experiment.schema.register_section`.  Quantities are
:class:`~uqreport.experiment.quantities.QuantitySpec` in internal units; defaults come from
:mod:`uqreport.defaults` and are listed in :attr:`Experiment.defaults_used`.
"""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass

from .. import defaults as D
from ..errors import InputError
from .quantities import QuantitySpec
from .schema import Field, Record, RecordSpec, register_section

__all__ = [
    "GLASSWARE_KINDS",
    "Blank",
    "Chemistry",
    "Correlation",
    "Cuvette",
    "Glassware",
    "Solution",
    "Spectrophotometer",
    "Stopwatch",
    "Study",
    "Timing",
]

#: Solution temperatures must be those of liquid water (catches a kelvin/celsius mix-up).
T_LOW, T_HIGH = 273.15, 373.15

GLASSWARE_KINDS = (
    "graduated cylinder",
    "volumetric flask",
    "volumetric pipette",
    "burette",
    "beaker",
    "other",
)

_ZERO_READING = D.TypeBDefault(
    name="reading error of one fill",
    value=0.0,
    unit="mL",
    u=0.0,
    source="no reading error given (u = 0)",
)
_ZERO_LAG = D.TypeBDefault(
    name="lag between recorded time and reading",
    value=0.0,
    unit="s",
    u=0.0,
    source="times recorded at the reading (lag 0)",
)
_ZERO_JITTER = D.TypeBDefault(
    name="scatter of the lag",
    value=0.0,
    unit="s",
    u=0.0,
    source="no scatter given (u = 0)",
)


def _temperature(
    name: str, doc: str, *, mode: str = "uncertain", required: bool = False, example: str = ""
) -> Field:
    return Field(
        name,
        mode,
        doc,
        required=required,
        dimension="temperature",
        low=T_LOW,
        high=T_HIGH,
        example=example,
    )


def _note(name: str = "note") -> Field:
    return Field(name, "str", "free text", default="")


# -- study ------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Study:
    """What was studied, by whom and when.

    Attributes
    ----------
    title:
        Title of the study.
    operator:
        Who made the measurements (a person or a group).
    date:
        The date of the measurements.
    temperature:
        Bath or room temperature of the study (uncertain, K).
    reference_temperature:
        Temperature to correct the rate constant to (plain, K), or ``None``.
    notes:
        Free text.
    invented:
        ``True`` when the data are invented (demo files); reports label them so.
    """

    title: str
    operator: str
    date: _dt.date
    temperature: QuantitySpec
    reference_temperature: QuantitySpec | None
    notes: str
    invented: bool


def _build_study(r: Record) -> Study:
    return Study(
        r["title"],
        r["operator"],
        r["date"],
        r["temperature"],
        r["reference_temperature"],
        r["notes"],
        bool(r["invented"]),
    )


STUDY = register_section(
    Field(
        "study",
        "record",
        "what, who and when",
        required=True,
        example="[study] with title, operator, date and temperature",
        record=RecordSpec(
            (
                Field("title", "str", "title of the study", required=True, example='title = "..."'),
                Field("operator", "str", "who measured", required=True, example='operator = "..."'),
                Field(
                    "date",
                    "date",
                    "date of the measurements",
                    required=True,
                    example="date = 2024-03-05",
                ),
                _temperature(
                    "temperature",
                    "bath or room temperature of the study",
                    required=True,
                    example='temperature = { value = 22.0, unit = "degC", half_width = 0.5 }',
                ),
                _temperature("reference_temperature", "temperature to correct k to", mode="plain"),
                _note("notes"),
                Field("invented", "bool", "the data are invented (demo)", default=False),
            ),
            _build_study,
        ),
    )
)


# -- chemistry -------------------------------------------------------------------------------
@dataclass(frozen=True)
class Chemistry:
    """The reacting species.

    Attributes
    ----------
    dye:
        Name of the dye followed by absorbance.
    excess_reagent:
        Name of the reagent in excess.
    wavelength:
        Wavelength of the dye's absorbance maximum (plain, nm), or ``None``.
    molar_absorptivity:
        Molar absorptivity of the dye at the measuring wavelength (uncertain,
        L/(mol cm)), or ``None``.
    activation_energy:
        Activation energy of the reaction (uncertain, J/mol), or ``None``.
    """

    dye: str
    excess_reagent: str
    wavelength: QuantitySpec | None
    molar_absorptivity: QuantitySpec | None
    activation_energy: QuantitySpec | None


CHEMISTRY = register_section(
    Field(
        "chemistry",
        "record",
        "the reacting species",
        record=RecordSpec(
            (
                Field("dye", "str", "name of the dye", default="dye"),
                Field(
                    "excess_reagent", "str", "name of the reagent in excess", default="hydroxide"
                ),
                Field(
                    "wavelength",
                    "plain",
                    "absorbance maximum of the dye",
                    dimension="wavelength",
                    low=0.0,
                    low_open=True,
                ),
                Field(
                    "molar_absorptivity",
                    "uncertain",
                    "molar absorptivity of the dye",
                    dimension="molar_absorptivity",
                    low=0.0,
                    low_open=True,
                ),
                Field(
                    "activation_energy",
                    "uncertain",
                    "activation energy of the reaction",
                    dimension="molar_energy",
                ),
            ),
            lambda r: Chemistry(
                r["dye"],
                r["excess_reagent"],
                r["wavelength"],
                r["molar_absorptivity"],
                r["activation_energy"],
            ),
        ),
    )
)


# -- spectrophotometer -----------------------------------------------------------------------
@dataclass(frozen=True)
class Spectrophotometer:
    """The absorbance instrument (always present; defaults filled).

    Attributes
    ----------
    wavelength:
        Wavelength set on the instrument (plain, nm), or ``None``.
    noise_sd:
        Standard deviation of one reading (plain, absorbance; default 0.002).
    noise_relative:
        Proportional part of the reading SD (plain, dimensionless; default 0).
    photometric_accuracy:
        Photometric bias of the instrument (uncertain offset, absorbance; default
        rectangular +/-0.005).
    linear_limit:
        Upper end of the linear absorbance range (plain; default 1.0).
    noise_floor:
        Absorbance below which readings are taken as noise-dominated (plain; default 0.02).
    stray_light:
        Stray-light fraction (plain, dimensionless), or ``None``.
    """

    wavelength: QuantitySpec | None
    noise_sd: QuantitySpec
    noise_relative: QuantitySpec
    photometric_accuracy: QuantitySpec
    linear_limit: QuantitySpec
    noise_floor: QuantitySpec
    stray_light: QuantitySpec | None


SPECTROPHOTOMETER = register_section(
    Field(
        "spectrophotometer",
        "record",
        "the instrument",
        when_absent="empty",
        record=RecordSpec(
            (
                Field(
                    "wavelength",
                    "plain",
                    "wavelength set on the instrument",
                    dimension="wavelength",
                    low=0.0,
                    low_open=True,
                ),
                # > 0: the fits weight each reading by 1/SD^2 (a zero SD gives infinite weights)
                Field(
                    "noise_sd",
                    "plain",
                    "SD of one reading",
                    dimension="absorbance",
                    default=D.NOISE_SD,
                    low=0.0,
                    low_open=True,
                ),
                Field(
                    "noise_relative",
                    "plain",
                    "proportional part of the SD",
                    dimension="dimensionless",
                    default=D.NOISE_RELATIVE,
                    low=0.0,
                ),
                Field(
                    "photometric_accuracy",
                    "offset",
                    "photometric bias",
                    dimension="absorbance",
                    default=D.PHOTOMETRIC_ACCURACY,
                ),
                Field(
                    "linear_limit",
                    "plain",
                    "upper end of the linear range",
                    dimension="absorbance",
                    default=D.LINEAR_ABSORBANCE_LIMIT,
                    low=0.0,
                    low_open=True,
                ),
                Field(
                    "noise_floor",
                    "plain",
                    "noise-dominated absorbance",
                    dimension="absorbance",
                    default=D.NOISE_FLOOR,
                    low=0.0,
                ),
                Field(
                    "stray_light",
                    "plain",
                    "stray-light fraction",
                    dimension="dimensionless",
                    low=0.0,
                    high=1.0,
                ),
            ),
            lambda r: Spectrophotometer(
                r["wavelength"],
                r["noise_sd"],
                r["noise_relative"],
                r["photometric_accuracy"],
                r["linear_limit"],
                r["noise_floor"],
                r["stray_light"],
            ),
        ),
    )
)


# -- blanks, cuvettes ------------------------------------------------------------------------
@dataclass(frozen=True)
class Blank:
    """A blank (zero) setting of the instrument.

    Attributes
    ----------
    name:
        The blank's id.
    offset:
        Residual zero offset of the readings taken after this blank (uncertain offset,
        absorbance).
    note:
        Free text.
    """

    name: str
    offset: QuantitySpec
    note: str


BLANKS = register_section(
    Field(
        "blanks",
        "mapping",
        "blank (zero) settings",
        record=RecordSpec(
            (
                Field(
                    "offset",
                    "offset",
                    "residual zero offset",
                    required=True,
                    dimension="absorbance",
                    example="offset = { half_width = 0.003 }",
                ),
                _note(),
            ),
            lambda r: Blank(str(r.name), r["offset"], r["note"]),
        ),
    )
)


@dataclass(frozen=True)
class Cuvette:
    """A cuvette.

    Attributes
    ----------
    name:
        The cuvette's id.
    pathlength:
        Optical pathlength (uncertain, cm).
    note:
        Free text.
    """

    name: str
    pathlength: QuantitySpec
    note: str


_PATH_EXAMPLE = (
    f'pathlength = {{ value = {D.CUVETTE_PATHLENGTH.value:g}, unit = "mm", half_width ='
    f' {D.CUVETTE_PATHLENGTH.half_width:g}, source = "..." }}; a reference cuvette is'
    f" {D.CUVETTE_PATHLENGTH.source}"
)

CUVETTES = register_section(
    Field(
        "cuvettes",
        "mapping",
        "cuvettes",
        record=RecordSpec(
            (
                Field(
                    "pathlength",
                    "uncertain",
                    "optical pathlength",
                    required=True,
                    dimension="length",
                    low=0.0,
                    low_open=True,
                    example=_PATH_EXAMPLE,
                ),
                _note(),
            ),
            lambda r: Cuvette(str(r.name), r["pathlength"], r["note"]),
        ),
    )
)


# -- glassware -------------------------------------------------------------------------------
@dataclass(frozen=True)
class Glassware:
    """One item of volumetric glassware.

    Attributes
    ----------
    name:
        The item's id.
    kind:
        One of :data:`GLASSWARE_KINDS`.
    capacity:
        Nominal capacity (plain, mL).
    glass_class:
        ``"A"``, ``"B"`` or ``None`` (the file's key is ``class``).
    tolerance:
        Calibration error of the item, shared by every fill (uncertain offset, mL); for a
        graduated cylinder with no tolerance given, ASTM E1272-02 Table 1, rectangular.
    reading:
        Random error of reading one fill (uncertain offset, mL; default u = 0).
    note:
        Free text.
    """

    name: str
    kind: str
    capacity: QuantitySpec
    glass_class: str | None
    tolerance: QuantitySpec | None
    reading: QuantitySpec
    note: str


def _build_glassware(r: Record) -> Glassware:
    tolerance = r["tolerance"]
    capacity = r["capacity"]
    if not r.given("tolerance") and capacity is not None:
        kind, cls = r["kind"], r["class"]
        if kind == "graduated cylinder" and cls is None:
            if not r.given("class"):
                r.add(
                    "tolerance",
                    "no tolerance and no class are given for this graduated cylinder.",
                    'add class = "A" or "B" (the ASTM E1272-02 Table 1'
                    " tolerance is then used), or give tolerance = { half_width = ...,"
                    ' unit = "mL" }.',
                )
        elif kind == "graduated cylinder" and cls is not None:
            try:
                default = D.graduated_cylinder_tolerance(capacity.value, cls)
            except InputError as exc:
                message, _, fix = str(exc).partition(" Fix: ")
                r.add("tolerance", message, fix)
            else:
                tolerance = r.ctx.default_quantity(r.sub("tolerance"), "volume", default)
        elif kind is not None:
            r.add(
                "tolerance",
                f"no default tolerance exists for a {kind}.",
                'give tolerance = { half_width = ..., unit = "mL", source = "..." } from the'
                " item's marking or certificate.",
            )
    reading = r["reading"]
    if reading is None and not r.given("reading"):
        reading = r.ctx.default_quantity(r.sub("reading"), "volume", _ZERO_READING)
    return Glassware(str(r.name), r["kind"], capacity, r["class"], tolerance, reading, r["note"])


GLASSWARE = register_section(
    Field(
        "glassware",
        "mapping",
        "volumetric glassware",
        record=RecordSpec(
            (
                Field(
                    "kind", "enum", "kind of glassware", choices=GLASSWARE_KINDS, default="other"
                ),
                Field(
                    "capacity",
                    "plain",
                    "nominal capacity",
                    required=True,
                    dimension="volume",
                    low=0.0,
                    low_open=True,
                    example='capacity = { value = 50, unit = "mL" }',
                ),
                Field("class", "enum", "class A or B", choices=("A", "B")),
                Field("tolerance", "offset", "calibration tolerance", dimension="volume"),
                Field("reading", "offset", "reading error of one fill", dimension="volume"),
                _note(),
            ),
            _build_glassware,
        ),
    )
)


# -- stopwatch, timing -----------------------------------------------------------------------
@dataclass(frozen=True)
class Stopwatch:
    """Manual timing (always present; defaults filled).

    Attributes
    ----------
    start_stop:
        Random error of one timed interval (uncertain offset, s; default u = 0.10 s).
    operator_bias:
        Error shared by every interval the same operator times (uncertain offset, s;
        default u = 0.05 s).
    resolution:
        Display resolution (plain, s; default 0.01 s).
    """

    start_stop: QuantitySpec
    operator_bias: QuantitySpec
    resolution: QuantitySpec


STOPWATCH = register_section(
    Field(
        "stopwatch",
        "record",
        "manual timing",
        when_absent="empty",
        record=RecordSpec(
            (
                Field(
                    "start_stop",
                    "offset",
                    "error of one timed interval",
                    dimension="time",
                    default=D.MANUAL_TIMING,
                ),
                Field(
                    "operator_bias",
                    "offset",
                    "error shared by one operator's intervals",
                    dimension="time",
                    default=D.OPERATOR_BIAS,
                ),
                Field(
                    "resolution",
                    "plain",
                    "display resolution",
                    dimension="time",
                    default=D.STOPWATCH_RESOLUTION,
                    low=0.0,
                ),
            ),
            lambda r: Stopwatch(r["start_stop"], r["operator_bias"], r["resolution"]),
        ),
    )
)


@dataclass(frozen=True)
class Timing:
    """How reading times were recorded (always present; defaults filled).

    Attributes
    ----------
    recorded_at:
        ``"reading"`` (the time is that of the reading) or ``"draw"`` (the time is that of
        drawing the sample; the reading follows ``lag`` later).
    lag:
        Mean gap from the recorded time to the actual reading (uncertain, s): actual reading
        time = recorded time + lag.  Default 0 with u = 0 for ``"reading"``.
    jitter:
        Scatter of the lag from reading to reading (uncertain offset, s; default u = 0).
    """

    recorded_at: str
    lag: QuantitySpec | None
    jitter: QuantitySpec


def _build_timing(r: Record) -> Timing:
    lag = r["lag"]
    if not r.given("lag"):
        if r["recorded_at"] == "draw":
            r.add(
                "lag",
                "recorded_at = 'draw' needs the lag from drawing a sample to reading it.",
                'add lag = { value = 20, unit = "s", u = 5 } (your own estimate).',
            )
        else:
            lag = r.ctx.default_quantity(r.sub("lag"), "time", _ZERO_LAG)
    jitter = r["jitter"]
    if not r.given("jitter"):
        jitter = r.ctx.default_quantity(r.sub("jitter"), "time", _ZERO_JITTER)
    return Timing(r["recorded_at"] or "reading", lag, jitter)


TIMING_FIELDS = (
    Field(
        "recorded_at",
        "enum",
        "what the recorded time marks",
        choices=("reading", "draw"),
        default="reading",
    ),
    Field("lag", "uncertain", "gap from recorded time to reading", dimension="time"),
    Field("jitter", "offset", "scatter of the lag", dimension="time"),
)


def _run_timing(r: Record) -> tuple[str, QuantitySpec | None, QuantitySpec | None]:
    """A run's recorded_at, lag and jitter: its own, else the ``[timing]`` section's.

    A run that records at a different point than ``[timing]`` does not inherit its lag: a
    ``"reading"`` run gets lag 0, a ``"draw"`` run must give its own.
    """
    timing = r.ctx.sections.get("timing")
    base = timing.recorded_at if timing is not None else "reading"
    recorded_at = r["recorded_at"] if r.given("recorded_at") else base
    if r.given("lag"):
        lag = r["lag"]
    elif recorded_at == base:
        lag = r.inherit("lag", timing.lag if timing is not None else None)
    elif recorded_at == "reading":
        lag = r.ctx.default_quantity(r.sub("lag"), "time", _ZERO_LAG)
    else:
        lag = None
        r.add(
            "lag",
            "recorded_at = 'draw' for this run needs the lag from drawing a sample to reading it.",
            'add lag = { value = 20, unit = "s", u = 5 } to the run.',
        )
    jitter = r.inherit("jitter", timing.jitter if timing is not None else None)
    return recorded_at, lag, jitter


TIMING = register_section(
    Field(
        "timing",
        "record",
        "how times were recorded",
        when_absent="empty",
        record=RecordSpec(TIMING_FIELDS, _build_timing),
    )
)


# -- solutions -------------------------------------------------------------------------------
@dataclass(frozen=True)
class Solution:
    """A solution: made up to a known concentration, or diluted from a stock.

    Attributes
    ----------
    name:
        The solution's id.
    concentration:
        Its concentration (uncertain, mol/L) when given directly, else ``None``.
    stock:
        Id of the solution it was diluted from, or ``None``.
    aliquot_volume:
        Volume of stock taken (uncertain, mL), for a dilution.
    final_volume:
        Volume it was made up to (uncertain, mL), for a dilution.
    description:
        Free text.
    reagent:
        ``"dye"``, ``"hydroxide"``, ``"other"`` or ``None``.
    """

    name: str
    concentration: QuantitySpec | None
    stock: str | None
    aliquot_volume: QuantitySpec | None
    final_volume: QuantitySpec | None
    description: str
    reagent: str | None

    @property
    def is_dilution(self) -> bool:
        """Whether the solution is made by diluting a stock."""
        return self.stock is not None


def _build_solution(r: Record) -> Solution:
    direct = r.given("concentration")
    dilution = [k for k in ("stock", "aliquot_volume", "final_volume") if r.given(k)]
    if direct and dilution:
        r.add(
            "",
            "both concentration and a dilution (" + ", ".join(dilution) + ") are given.",
            "give either concentration, or stock + aliquot_volume + final_volume.",
        )
    elif not direct and not dilution:
        r.add(
            "",
            "the solution has neither a concentration nor a dilution.",
            'give concentration = { value = ..., unit = "mol/L", u = ... }, or stock ='
            ' "<solution id>" with aliquot_volume and final_volume.',
        )
    elif dilution and len(dilution) < 3:
        missing = [k for k in ("stock", "aliquot_volume", "final_volume") if k not in dilution]
        r.add(
            missing[0],
            f"a dilution needs stock, aliquot_volume and final_volume;"
            f" {', '.join(missing)} missing.",
            f"add {', '.join(missing)}.",
        )
    aliquot, final = r["aliquot_volume"], r["final_volume"]
    if aliquot is not None and final is not None and aliquot.value > final.value:
        r.add(
            "aliquot_volume",
            f"the aliquot ({aliquot.value:g} mL) is larger than the final"
            f" volume ({final.value:g} mL).",
            "check the two volumes.",
        )
    if r["stock"] is not None and r["stock"] == r.name:
        r.add(
            "stock",
            f"solution '{r.name}' is diluted from itself.",
            "name the stock it was diluted from.",
        )
    return Solution(
        str(r.name), r["concentration"], r["stock"], aliquot, final, r["description"], r["reagent"]
    )


def _volume(name: str, doc: str) -> Field:
    return Field(
        name, "uncertain", doc, dimension="volume", low=0.0, low_open=True, glassware_ok=True
    )


SOLUTIONS = register_section(
    Field(
        "solutions",
        "mapping",
        "solutions",
        record=RecordSpec(
            (
                Field(
                    "concentration",
                    "uncertain",
                    "concentration",
                    dimension="concentration",
                    low=0.0,
                    low_open=True,
                ),
                Field("stock", "ref", "solution diluted from", target="solutions"),
                _volume("aliquot_volume", "volume of stock taken"),
                _volume("final_volume", "volume made up to"),
                Field("description", "str", "free text", default=""),
                Field("reagent", "enum", "what it carries", choices=("dye", "hydroxide", "other")),
            ),
            _build_solution,
        ),
    )
)


# -- correlations ----------------------------------------------------------------------------
@dataclass(frozen=True)
class Correlation:
    """A correlation coefficient between two quantities of the file.

    Attributes
    ----------
    a, b:
        Key paths of the two quantities (the quantities' own keys after loading, e.g.
        ``"solutions.oh_stock.concentration"``).
    r:
        The correlation coefficient, in [-1, 1].
    key:
        Where the entry is in the file (``"correlations[0]"``).
    """

    a: str
    b: str
    r: float
    key: str


CORRELATIONS = register_section(
    Field(
        "correlations",
        "records",
        "correlation coefficients",
        record=RecordSpec(
            (
                Field(
                    "a",
                    "str",
                    "key path of a quantity",
                    required=True,
                    example='a = "solutions.oh_stock.concentration"',
                ),
                Field("b", "str", "key path of a quantity", required=True, example='b = "..."'),
                Field(
                    "r",
                    "number",
                    "correlation coefficient",
                    required=True,
                    low=-1.0,
                    high=1.0,
                    example="r = 0.5",
                ),
            ),
            lambda r: Correlation(r["a"], r["b"], r["r"], r.key),
        ),
    )
)

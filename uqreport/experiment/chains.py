"""The measurement sections of an experiment file: batch runs, pumps, stirred tanks, tracer.

Each run names a table of readings (:mod:`uqreport.tables`).  Values a run does not give are
inherited from the general sections (temperature from ``[study]``, timing from ``[timing]``,
linear range from ``[spectrophotometer]``); an inherited quantity keeps the key of the place
it comes from (so the chain sees one shared input), and the run's own key path is an alias
of it (:meth:`Experiment.quantity` finds both).
"""

from __future__ import annotations

import warnings
from collections.abc import Mapping
from dataclasses import dataclass, replace

from ..errors import InputError, ValidationWarning
from ..tables import Table
from ..units import parse_unit
from .quantities import QuantitySpec
from .schema import Field, Record, RecordSpec, register_section
from .sections import TIMING_FIELDS, _note, _run_timing, _temperature, _volume

__all__ = [
    "MIN_BATCH_READINGS",
    "BatchRun",
    "BatchSection",
    "Feed",
    "Pump",
    "TankRun",
    "TankSection",
    "TracerRun",
    "TracerSection",
    "Vessel",
]


def _run_temperature(r: Record) -> QuantitySpec | None:
    study = r.ctx.sections.get("study")
    return r.inherit("temperature", study.temperature if study is not None else None)


def _check_reagent(r: Record, name: str, unwanted: str) -> None:
    sid = r[name]
    sol = (r.ctx.sections.get("solutions") or {}).get(sid) if sid else None
    if sol is not None and sol.reagent == unwanted:
        r.add(
            name,
            f"solution '{sid}' is marked reagent = '{unwanted}'.",
            f"name a solution of the right reagent in {name}, or correct its reagent.",
        )


# -- batch ------------------------------------------------------------------------------------
@dataclass(frozen=True)
class BatchRun:
    """One batch run: a mixture whose absorbance was read against time.

    Attributes
    ----------
    name:
        The run's name (unique across all runs of the file).
    key:
        Its key path, ``"batch.runs[<name>]"``.
    table:
        The readings (a ``batch`` table).
    blank:
        Id of the blank the readings were taken after, or ``None``.
    cuvette:
        Id of the cuvette of the readings with an empty (or no) cuvette column, or ``None``.
    temperature:
        Temperature of the run (uncertain, K; default the study's, key ``study.temperature``).
    hydroxide_concentration:
        Hydroxide concentration in the mixture (uncertain, mol/L), when given directly.
    hydroxide_solution, hydroxide_volume:
        The hydroxide solution's id and the volume of it in the mixture (mL), when the
        mixture is described by volumes.
    dye_solution, dye_volume:
        The dye solution's id and the volume of it in the mixture (mL), or ``None``.
    water_volume:
        Volume of water added to the mixture (mL), or ``None``.
    dye_concentration:
        Initial dye concentration in the mixture (mol/L) when no dye solution is named.
    final_absorbance:
        Measured final absorbance (for ``baseline = "measured"``), or ``None``.
    recorded_at, lag, jitter:
        Timing of the readings (default: the ``[timing]`` section's).
    note:
        Free text.
    """

    name: str
    key: str
    table: Table
    blank: str | None
    cuvette: str | None
    temperature: QuantitySpec
    hydroxide_concentration: QuantitySpec | None
    hydroxide_solution: str | None
    hydroxide_volume: QuantitySpec | None
    dye_solution: str | None
    dye_volume: QuantitySpec | None
    water_volume: QuantitySpec | None
    dye_concentration: QuantitySpec | None
    final_absorbance: QuantitySpec | None
    recorded_at: str
    lag: QuantitySpec
    jitter: QuantitySpec
    note: str

    @property
    def by_volumes(self) -> bool:
        """Whether the mixture is described by solution volumes (else by concentration)."""
        return self.hydroxide_solution is not None


def _check_mixture(r: Record) -> None:
    direct = r.given("hydroxide_concentration")
    parts = [k for k in ("hydroxide_solution", "hydroxide_volume") if r.given(k)]
    if direct and parts:
        r.add(
            "",
            "both hydroxide_concentration and " + " + ".join(parts) + " are given.",
            "give either hydroxide_concentration (in the mixture), or hydroxide_solution +"
            " hydroxide_volume.",
        )
    elif (
        not direct
        and not parts
        and not any(
            r.misspelt(k)
            for k in ("hydroxide_concentration", "hydroxide_solution", "hydroxide_volume")
        )
    ):
        r.add(
            "",
            "the run gives no hydroxide: neither hydroxide_concentration nor"
            " hydroxide_solution + hydroxide_volume.",
            'add hydroxide_concentration = { value = ..., unit = "mol/L", u = ... }, or'
            ' hydroxide_solution = "<id>" with hydroxide_volume.',
        )
    elif len(parts) == 1:
        other = "hydroxide_volume" if parts[0] == "hydroxide_solution" else "hydroxide_solution"
        r.add(other, f"{parts[0]} is given without {other}.", f"add {other}.")
    dye = [k for k in ("dye_solution", "dye_volume") if r.given(k)]
    if len(dye) == 1:
        other = "dye_volume" if dye[0] == "dye_solution" else "dye_solution"
        r.add(other, f"{dye[0]} is given without {other}.", f"add {other}.")
    if dye and r.given("dye_concentration"):
        r.add(
            "dye_concentration",
            "dye_concentration is given together with dye_solution.",
            "give one: dye_concentration (in the mixture) or dye_solution + dye_volume.",
        )
    for name in ("dye_volume", "water_volume"):
        if r.given(name) and direct:
            r.add(
                name,
                f"{name} is given, but the mixture's hydroxide is given as a"
                " concentration, so the mixture's volumes are incomplete.",
                "describe the mixture by volumes (hydroxide_solution + hydroxide_volume),"
                f" or give dye_concentration and remove {name}.",
            )
    if parts and not direct:
        _check_reagent(r, "hydroxide_solution", "dye")
        _check_reagent(r, "dye_solution", "hydroxide")


def _build_batch_run(r: Record) -> BatchRun:
    temperature = _run_temperature(r)
    _check_mixture(r)
    recorded_at, lag, jitter = _run_timing(r)
    table = r["table"]
    if table is not None and table.has_column("cuvette") and not r.given("cuvette"):
        empty = [table.line_of(i) for i, c in enumerate(table.frame["cuvette"]) if not c]
        if empty:
            shown = ", ".join(str(v) for v in empty[:5]) + (" ..." if len(empty) > 5 else "")
            r.add(
                "cuvette",
                f"the table has readings with no cuvette (lines {shown}) and the"
                " run names no cuvette.",
                'add cuvette = "<id>" to the run, or fill the cuvette column.',
            )
    return BatchRun(
        str(r.name or r.key),
        r.key,
        table,
        r["blank"],
        r["cuvette"],
        temperature,  # type: ignore[arg-type]
        r["hydroxide_concentration"],
        r["hydroxide_solution"],
        r["hydroxide_volume"],
        r["dye_solution"],
        r["dye_volume"],
        r["water_volume"],
        r["dye_concentration"],
        r["final_absorbance"],
        recorded_at,
        lag,
        jitter,
        r["note"],  # type: ignore[arg-type]
    )


def _conc(name: str, doc: str) -> Field:
    return Field(name, "uncertain", doc, dimension="concentration", low=0.0, low_open=True)


def _name() -> Field:
    return Field("name", "str", "name of the run", required=True, example='name = "r1"')


BATCH_RUN = RecordSpec(
    (
        _name(),
        Field(
            "table", "path", "readings", required=True, table="batch", example='table = "r1.csv"'
        ),
        Field("blank", "ref", "blank id", target="blanks"),
        Field("cuvette", "ref", "cuvette id", target="cuvettes"),
        _temperature("temperature", "temperature of the run"),
        _conc("hydroxide_concentration", "hydroxide in the mixture"),
        Field("hydroxide_solution", "ref", "hydroxide solution id", target="solutions"),
        _volume("hydroxide_volume", "volume of hydroxide solution"),
        Field("dye_solution", "ref", "dye solution id", target="solutions"),
        _volume("dye_volume", "volume of dye solution"),
        Field(
            "water_volume",
            "uncertain",
            "volume of water",
            dimension="volume",
            low=0.0,
            glassware_ok=True,
        ),
        _conc("dye_concentration", "initial dye in the mixture"),
        # the range of a table's absorbance column (a reading of the same instrument)
        Field(
            "final_absorbance",
            "uncertain",
            "measured final absorbance",
            dimension="absorbance",
            low=-0.5,
            high=5.0,
        ),
        *TIMING_FIELDS,
        _note(),
    ),
    _build_batch_run,
    name_field="name",
)


#: Fewest usable readings (flag empty, inside the fit window) of a batch run: the loader
#: checks the table, the batch chain the readings left after the noise floor.
MIN_BATCH_READINGS = 5


@dataclass(frozen=True)
class BatchSection:
    """Batch runs and how to fit them.

    Attributes
    ----------
    baseline:
        ``"fitted"`` (final absorbance is a fit parameter), ``"measured"`` (each run's
        ``final_absorbance``) or ``"zero"``.
    initial:
        ``"free"`` (initial absorbance fitted) or ``"from_concentration"`` (from the dye
        concentration, molar absorptivity and pathlength).
    noise_model:
        ``"constant"`` or ``"proportional"`` reading noise.
    noise_source:
        ``"auto"`` (the noise model unless the scatter about the fit is larger at the 95 %
        level, then the residuals), ``"spec"`` (always the noise model) or ``"residuals"``
        (always the scatter about the fit, Type A with n - p degrees of freedom).
    method:
        ``"exponential"`` (weighted nonlinear fit of A(t)) or ``"log-linear"`` (weighted
        straight line ln(A - A_inf) against t; needs a known baseline).
    fit_start, fit_end:
        Time window of the fit (plain, s), or ``None``.
    linear_limit, noise_floor:
        Absorbance limits (plain; default the spectrophotometer's).
    runs:
        The runs, in file order.
    """

    baseline: str
    initial: str
    noise_model: str
    noise_source: str
    method: str
    fit_start: QuantitySpec | None
    fit_end: QuantitySpec | None
    linear_limit: QuantitySpec
    noise_floor: QuantitySpec
    runs: tuple[BatchRun, ...]


def _build_batch(r: Record) -> BatchSection:
    spectro = r.ctx.sections.get("spectrophotometer")
    linear = r.inherit("linear_limit", spectro.linear_limit if spectro else None)
    floor = r.inherit("noise_floor", spectro.noise_floor if spectro else None)
    start, end = r["fit_start"], r["fit_end"]
    if start is not None and end is not None and start.value >= end.value:
        r.add(
            "fit_end",
            f"fit_end ({end.value:g} s) is not after fit_start ({start.value:g} s).",
            "give a fit window with fit_start < fit_end.",
        )
    runs = tuple(x for x in (r["runs"] or ()) if x is not None)
    if r["method"] == "log-linear" and r["baseline"] == "fitted":
        r.add(
            "method",
            "method = 'log-linear' needs a known baseline, but baseline = 'fitted'.",
            "set baseline = 'zero' or 'measured', or use method = 'exponential'.",
        )
    return BatchSection(
        r["baseline"],
        r["initial"],
        r["noise_model"],
        r["noise_source"],
        r["method"],
        start,
        end,
        linear,
        floor,
        runs,
    )  # type: ignore[arg-type]


BATCH = register_section(
    Field(
        "batch",
        "record",
        "batch runs",
        record=RecordSpec(
            (
                Field(
                    "baseline",
                    "enum",
                    "final absorbance",
                    choices=("fitted", "measured", "zero"),
                    default="fitted",
                ),
                Field(
                    "initial",
                    "enum",
                    "initial absorbance",
                    choices=("free", "from_concentration"),
                    default="free",
                ),
                Field(
                    "noise_model",
                    "enum",
                    "reading noise",
                    choices=("constant", "proportional"),
                    default="constant",
                ),
                Field(
                    "noise_source",
                    "enum",
                    "where the readings' uncertainty comes from",
                    choices=("auto", "spec", "residuals"),
                    default="auto",
                ),
                Field(
                    "method",
                    "enum",
                    "how each run is fitted",
                    choices=("exponential", "log-linear"),
                    default="exponential",
                ),
                Field("fit_start", "plain", "start of the fit window", dimension="time", low=0.0),
                Field("fit_end", "plain", "end of the fit window", dimension="time", low=0.0),
                Field(
                    "linear_limit",
                    "plain",
                    "upper end of the linear range",
                    dimension="absorbance",
                    low=0.0,
                    low_open=True,
                ),
                Field(
                    "noise_floor",
                    "plain",
                    "noise-dominated absorbance",
                    dimension="absorbance",
                    low=0.0,
                ),
                Field(
                    "runs",
                    "records",
                    "the runs",
                    required=True,
                    record=BATCH_RUN,
                    min_items=1,
                    example="one [[batch.runs]] table per run",
                ),
            ),
            _build_batch,
        ),
    )
)


# -- pumps ------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Pump:
    """A pump and its calibration table.

    Attributes
    ----------
    name:
        The pump's id.
    table:
        The calibration (a ``pump`` table).
    glassware:
        Id of the glassware the volumes were collected in.
    fit:
        ``"line"``, ``"quadratic"`` or ``"auto"``: flow against setting.
    repeatability:
        Relative day-to-day repeatability of the flow (uncertain offset, dimensionless), or
        ``None`` (estimated from the calibration's residuals).
    note:
        Free text.
    """

    name: str
    table: Table
    glassware: str
    fit: str
    repeatability: QuantitySpec | None
    note: str


def _build_pump(r: Record) -> Pump:
    table, gid = r["table"], r["glassware"]
    if table is not None:
        settings = table.frame["setting"]
        distinct = settings.nunique()
        need = 3 if r["fit"] == "quadratic" else 2
        if distinct < need:
            r.add(
                "table",
                f"the calibration has {distinct} distinct setting(s); fit ="
                f" '{r['fit']}' needs at least {need}.",
                f"calibrate at {need} or more settings, or use fit = 'line'.",
            )
        elif r["repeatability"] is None and not r.given("repeatability") and len(settings) <= need:
            r.add(
                "repeatability",
                f"the calibration has {len(settings)} rows, too few to"
                " estimate the repeatability from the residuals.",
                "repeat some settings, or give repeatability = { u = 0.01 } (relative).",
            )
    return Pump(str(r.name), table, gid, r["fit"], r["repeatability"], r["note"])


PUMPS = register_section(
    Field(
        "pumps",
        "mapping",
        "pumps and their calibrations",
        record=RecordSpec(
            (
                Field(
                    "table",
                    "path",
                    "calibration",
                    required=True,
                    table="pump",
                    example='table = "pump_a.csv"',
                ),
                Field(
                    "glassware",
                    "ref",
                    "glassware id the volumes were collected in",
                    required=True,
                    target="glassware",
                    example='glassware = "<glassware id>"',
                ),
                Field(
                    "fit",
                    "enum",
                    "flow against setting",
                    choices=("line", "quadratic", "auto"),
                    default="line",
                ),
                Field(
                    "repeatability",
                    "offset",
                    "relative repeatability of the flow",
                    dimension="dimensionless",
                ),
                _note(),
            ),
            _build_pump,
        ),
    )
)


# -- tanks ------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Vessel:
    """A stirred tank.

    Attributes
    ----------
    name:
        The vessel's id.
    volume:
        Working volume (uncertain, mL).
    note:
        Free text.
    """

    name: str
    volume: QuantitySpec
    note: str


@dataclass(frozen=True)
class Feed:
    """A feed stream: a solution pumped at a setting.

    Attributes
    ----------
    solution:
        Id of the solution fed (``None`` for a tracer's water feed).
    pump:
        Id of the pump.
    setting:
        Pump setting (plain, dimensionless; a bare number is in the unit of the pump's
        calibration table).
    """

    solution: str | None
    pump: str
    setting: QuantitySpec


def _build_feed(r: Record) -> Feed:
    setting, pid = r["setting"], r["pump"]
    pump = (r.ctx.sections.get("pumps") or {}).get(pid) if pid else None
    if setting is not None and pump is not None and pump.table is not None:
        table_unit = pump.table.units.get("setting") or "1"
        raw = r.raw.get("setting")
        try:
            unit = parse_unit(table_unit, "dimensionless")
        except InputError:  # reported with the table
            unit = None
        if unit is not None and not (isinstance(raw, Mapping) and "unit" in raw):
            setting = replace(setting, value=setting.value * unit.factor, given_unit=table_unit)
            r.ctx.quantities[setting.key] = setting
        elif (
            unit is not None
            and parse_unit(setting.given_unit, "dimensionless").symbol != unit.symbol
        ):
            r.add(
                "setting",
                f"the setting is in '{setting.given_unit}' but pump '{pid}' is"
                f" calibrated in '{table_unit}'.",
                f"write the setting in the calibration's unit ('{table_unit}').",
            )
            unit = None
        lo, hi = pump.table.frame["setting"].min(), pump.table.frame["setting"].max()
        if unit is not None and not (lo <= setting.value <= hi):
            warnings.warn(
                ValidationWarning(
                    f"{r.ctx.where(r.sub('setting'))}: setting {setting.value:g} lies outside the"
                    f" calibrated settings of pump '{pid}' ({lo:g} to {hi:g}); the flow is"
                    " extrapolated."
                ),
                stacklevel=2,
            )
    return Feed(r.values.get("solution"), pid, setting)


def _feed_fields(with_solution: bool) -> tuple[Field, ...]:
    sol = (
        (
            Field(
                "solution",
                "ref",
                "solution fed",
                required=True,
                target="solutions",
                example='solution = "<solution id>"',
            ),
        )
        if with_solution
        else ()
    )
    return (
        *sol,
        Field(
            "pump", "ref", "pump id", required=True, target="pumps", example='pump = "<pump id>"'
        ),
        Field(
            "setting",
            "plain",
            "pump setting",
            required=True,
            dimension="dimensionless",
            low=0.0,
            example="setting = 5",
        ),
    )


FEED = RecordSpec(_feed_fields(True), _build_feed)
WATER_FEED = RecordSpec(_feed_fields(False), _build_feed)


@dataclass(frozen=True)
class TankRun:
    """A run through one stirred tank or two in series.

    Attributes
    ----------
    name:
        The run's name.
    key:
        Its key path, ``"tanks.runs[<name>]"``.
    vessels:
        Ids of the vessels in flow order (one or two).
    table:
        The readings (a ``tank`` table).
    dye_feed, hydroxide_feed:
        The two feeds.
    cuvette, blank:
        Ids, or ``None``.
    temperature:
        Temperature of the run (uncertain, K; default the study's).
    steady_from:
        Start of the steady plateau (plain, s), or ``None``.
    note:
        Free text.
    """

    name: str
    key: str
    vessels: tuple[str, ...]
    table: Table
    dye_feed: Feed
    hydroxide_feed: Feed
    cuvette: str | None
    blank: str | None
    temperature: QuantitySpec
    steady_from: QuantitySpec | None
    note: str


def _build_tank_run(r: Record) -> TankRun:
    temperature = _run_temperature(r)
    vessels = tuple(v for v in (r["vessels"] or ()) if v is not None)
    if len(set(vessels)) < len(vessels):
        r.add(
            "vessels",
            f"vessel '{vessels[0]}' is listed twice.",
            "list each tank of the train once, in flow order.",
        )
    solutions = r.ctx.sections.get("solutions") or {}
    for feed_name, unwanted in (("dye_feed", "hydroxide"), ("hydroxide_feed", "dye")):
        feed = r[feed_name]
        sol = solutions.get(feed.solution) if feed is not None and feed.solution else None
        if sol is not None and sol.reagent == unwanted:
            r.add(
                f"{feed_name}.solution",
                f"solution '{sol.name}' is marked reagent = '{unwanted}'.",
                f"feed a solution of the right reagent in {feed_name}.",
            )
    table = r["table"]
    if table is not None and vessels:
        tanks = table.frame["tank"]
        if len(vessels) == 2 and not table.has_column("tank"):
            r.add(
                "table",
                f"the run goes through two tanks but {r.ctx.table_name(table)} has"
                " no 'tank' column.",
                "add a 'tank' column (1 or 2) saying which tank each reading is from.",
            )
        if len(vessels) == 1 and (tanks == 2).any():
            row = int((tanks == 2).to_numpy().argmax())
            r.ctx.add_at(
                r.ctx.cell(table, row, "tank"),
                "a reading from tank 2, but the run has one vessel.",
                "list both vessels, or correct the tank number.",
            )
        steady = r["steady_from"]
        if steady is not None:
            for tank in sorted(set(int(t) for t in tanks)):
                n = int(((tanks == tank) & (table.frame["time"] >= steady.value)).sum())
                if n < 2:
                    r.add(
                        "steady_from",
                        f"tank {tank} has {n} reading(s) from steady_from = {steady.value:g} s on.",
                        "give an earlier steady_from, or take more readings on the plateau.",
                    )
    return TankRun(
        str(r.name or r.key),
        r.key,
        vessels,
        table,
        r["dye_feed"],
        r["hydroxide_feed"],
        r["cuvette"],
        r["blank"],
        temperature,  # type: ignore[arg-type]
        r["steady_from"],
        r["note"],
    )


@dataclass(frozen=True)
class TankSection:
    """Stirred tanks and the runs through them.

    Attributes
    ----------
    vessels:
        Vessel id -> :class:`Vessel`.
    runs:
        The runs, in file order.
    """

    vessels: dict[str, Vessel]
    runs: tuple[TankRun, ...]


TANK_RUN = RecordSpec(
    (
        _name(),
        Field(
            "vessels",
            "list",
            "vessel ids in flow order",
            required=True,
            min_items=1,
            max_items=2,
            item=Field("vessel", "ref", "vessel id", target="tanks.vessels"),
            example='vessels = ["<vessel id>"]',
        ),
        Field("table", "path", "readings", required=True, table="tank", example='table = "c1.csv"'),
        Field(
            "dye_feed",
            "record",
            "dye feed",
            required=True,
            record=FEED,
            example='dye_feed = { solution = "<id>", pump = "<id>", setting = 5 }',
        ),
        Field(
            "hydroxide_feed",
            "record",
            "hydroxide feed",
            required=True,
            record=FEED,
            example='hydroxide_feed = { solution = "<id>", pump = "<id>", setting = 5 }',
        ),
        Field("cuvette", "ref", "cuvette id", target="cuvettes"),
        Field("blank", "ref", "blank id", target="blanks"),
        _temperature("temperature", "temperature of the run"),
        Field("steady_from", "plain", "start of the plateau", dimension="time", low=0.0),
        _note(),
    ),
    _build_tank_run,
    name_field="name",
)

TANKS = register_section(
    Field(
        "tanks",
        "record",
        "stirred tanks",
        record=RecordSpec(
            (
                Field(
                    "vessels",
                    "mapping",
                    "the tanks",
                    record=RecordSpec(
                        (
                            Field(
                                "volume",
                                "uncertain",
                                "working volume",
                                required=True,
                                dimension="volume",
                                low=0.0,
                                low_open=True,
                                example='volume = { value = 500, unit = "mL", half_width = 10 }',
                            ),
                            _note(),
                        ),
                        lambda r: Vessel(str(r.name), r["volume"], r["note"]),
                    ),
                ),
                Field("runs", "records", "runs through the tanks", record=TANK_RUN),
            ),
            lambda r: TankSection(
                r["vessels"] or {}, tuple(x for x in (r["runs"] or ()) if x is not None)
            ),
        ),
    )
)


# -- tracer -----------------------------------------------------------------------------------
@dataclass(frozen=True)
class TracerRun:
    """A tracer wash-out of one vessel.

    Attributes
    ----------
    name:
        The run's name.
    key:
        Its key path, ``"tracer.runs[<name>]"``.
    vessel:
        Id of the vessel washed out.
    table:
        The readings (a ``tracer`` table).
    feeds:
        The feeds (pump and setting) that wash it out.
    cuvette, blank:
        Ids, or ``None``.
    note:
        Free text.
    """

    name: str
    key: str
    vessel: str
    table: Table
    feeds: tuple[Feed, ...]
    cuvette: str | None
    blank: str | None
    note: str


@dataclass(frozen=True)
class TracerSection:
    """Tracer wash-out runs.

    Attributes
    ----------
    runs:
        The runs, in file order.
    """

    runs: tuple[TracerRun, ...]


def _build_tracer_run(r: Record) -> TracerRun:
    table = r["table"]
    if table is not None and len(table) < 3:
        r.add(
            "table",
            f"{r.ctx.table_name(table)} has {len(table)} reading(s); a wash-out"
            " fit needs at least 3.",
            "take more readings.",
        )
    return TracerRun(
        str(r.name or r.key),
        r.key,
        r["vessel"],
        table,  # type: ignore[arg-type]
        tuple(x for x in (r["feeds"] or ()) if x is not None),
        r["cuvette"],
        r["blank"],
        r["note"],
    )


TRACER = register_section(
    Field(
        "tracer",
        "record",
        "tracer wash-out runs",
        record=RecordSpec(
            (
                Field(
                    "runs",
                    "records",
                    "the runs",
                    required=True,
                    min_items=1,
                    example=("one [[tracer.runs]] table per run"),
                    record=RecordSpec(
                        (
                            _name(),
                            Field(
                                "vessel",
                                "ref",
                                "vessel id",
                                required=True,
                                target="tanks.vessels",
                                example='vessel = "<vessel id>"',
                            ),
                            Field(
                                "table",
                                "path",
                                "readings",
                                required=True,
                                table="tracer",
                                example='table = "t1.csv"',
                            ),
                            Field(
                                "feeds",
                                "records",
                                "feeds",
                                required=True,
                                min_items=1,
                                record=WATER_FEED,
                                example='feeds = [ { pump = "<id>", setting = 5 } ]',
                            ),
                            Field("cuvette", "ref", "cuvette id", target="cuvettes"),
                            Field("blank", "ref", "blank id", target="blanks"),
                            _note(),
                        ),
                        _build_tracer_run,
                        name_field="name",
                    ),
                ),
            ),
            lambda r: TracerSection(tuple(x for x in (r["runs"] or ()) if x is not None)),
        ),
    )
)

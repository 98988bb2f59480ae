"""The optional ``[plan]`` section: the achievable improvements the planner tries.

Every key has a documented default, so the planner runs without the section.
"""

from __future__ import annotations

from dataclasses import dataclass

from ..defaults import TypeBDefault
from .quantities import QuantitySpec
from .schema import Field, Record, RecordSpec, register_section

__all__ = ["PlanSection"]

#: Bath temperature held to +/-0.1 K (a stirred, thermostatted water bath; common practice).
BATH_CONTROL = TypeBDefault(
    name="temperature control of a thermostatted bath",
    value=0.0,
    unit="K",
    half_width=0.1,
    distribution="rectangular",
    source="a thermostatted, stirred bath held to +/-0.1 K (common practice)",
)

#: Reading times stamped by the instrument's clock (resolution 0.1 s, rectangular).
INSTRUMENT_TIMING = TypeBDefault(
    name="reading times recorded by the instrument",
    value=0.0,
    unit="s",
    half_width=0.05,
    distribution="rectangular",
    source="instrument time stamps with 0.1 s resolution (common practice)",
)


@dataclass(frozen=True)
class PlanSection:
    """Achievable improvements for the planner's what-if cases.

    Attributes
    ----------
    extra_readings:
        Readings added to every batch run over the same time span (``None``: as many again).
    extra_runs:
        Replicate batch runs added.
    temperature:
        The achievable temperature uncertainty (an offset, K).
    timing:
        The achievable reading-time uncertainty when times are stamped by the instrument
        (an offset, s); the draw-to-reading lag is then zero.
    glassware_class:
        The glassware class to try ("A": half the class B tolerance, ASTM E1272).
    """

    extra_readings: int | None
    extra_runs: int
    temperature: QuantitySpec
    timing: QuantitySpec
    glassware_class: str


PLAN = register_section(
    Field(
        "plan",
        "record",
        "achievable improvements for the planner",
        when_absent="empty",
        record=RecordSpec(
            (
                Field("extra_readings", "int", "readings added to every batch run", low=1),
                Field("extra_runs", "int", "replicate batch runs added", default=1, low=1),
                Field(
                    "temperature",
                    "offset",
                    "achievable temperature uncertainty",
                    dimension="temperature",
                    default=BATH_CONTROL,
                ),
                Field(
                    "timing",
                    "offset",
                    "achievable reading-time uncertainty with instrument time stamps",
                    dimension="time",
                    default=INSTRUMENT_TIMING,
                ),
                Field(
                    "glassware_class",
                    "enum",
                    "glassware class to try",
                    choices=("A", "B"),
                    default="A",
                ),
            ),
            lambda r: _build(r),
        ),
    )
)


def _build(r: Record) -> PlanSection:
    return PlanSection(
        r["extra_readings"], r["extra_runs"], r["temperature"], r["timing"], r["glassware_class"]
    )

"""Tests of uqreport.units against the definitions of the units themselves.

Sources of the reference numbers:
- SI Brochure, 9th edition (BIPM 2019), Table 8 (non-SI units accepted for use with the SI):
  1 min = 60 s, 1 h = 3600 s, 1 L = 1 dm^3 = 10^3 cm^3.
- SI Brochure, 9th edition, section 2.3.1 (unit of Celsius temperature): t/degC = T/K - 273.15,
  and a Celsius temperature difference equals the same difference in kelvins.
- SI Brochure, 9th edition, Table 7 (SI prefixes): milli = 1e-3, micro = 1e-6, kilo = 1e3.
- IUPAC Green Book, 3rd edition, section 2.10: the symbol M is used for mol dm^-3 = mol/L.
- ISO 80000-1:2009, 3.8 (percent): % = 0.01.
"""

from __future__ import annotations

import math

import pytest

from uqreport.errors import InputError
from uqreport.units import DIMENSIONS, convert_scale, convert_value, internal_unit, parse_unit


@pytest.mark.parametrize(
    ("value", "unit", "dimension", "expected"),
    [
        (1.0, "min", "time", 60.0),  # SI Brochure Table 8
        (1.0, "h", "time", 3600.0),  # SI Brochure Table 8
        (1.0, "L", "volume", 1000.0),  # 1 L = 1 dm^3 = 1000 cm^3 = 1000 mL
        (1.0, "cm^3", "volume", 1.0),
        (250.0, "uL", "volume", 0.25),  # micro = 1e-6 L = 1e-3 mL
        (1.0, "M", "concentration", 1.0),  # IUPAC Green Book 2.10
        (20.0, "umol/L", "concentration", 20e-6),
        (5.0, "mM", "concentration", 5e-3),
        (10.0, "mm", "length", 1.0),  # milli: 10 mm = 1 cm
        (0.01, "m", "length", 1.0),
        (55.0, "kJ/mol", "molar_energy", 55e3),  # kilo = 1e3
        (50.0, "%", "dimensionless", 0.5),  # ISO 80000-1 3.8
        (1.0, "L/min", "flow", 1000.0 / 60.0),
        (36.0, "mL/h", "flow", 0.01),
        (1.0, "L/(mol*min)", "second_order_rate", 1.0 / 60.0),
        (6.0, "1/min", "first_order_rate", 0.1),
        (8.0e4, "M^-1 cm^-1", "molar_absorptivity", 8.0e4),
    ],
)
def test_convert_value_matches_unit_definitions(value, unit, dimension, expected):
    assert math.isclose(convert_value(value, unit, dimension), expected, rel_tol=1e-12)


def test_celsius_to_kelvin_follows_the_si_definition():
    # SI Brochure 2.3.1: T/K = t/degC + 273.15
    assert convert_value(22.0, "degC", "temperature") == pytest.approx(295.15, abs=1e-12)
    assert convert_value(0.0, "°C", "temperature") == pytest.approx(273.15, abs=1e-12)
    assert convert_value(300.0, "K", "temperature") == 300.0


def test_uncertainty_of_a_celsius_temperature_converts_without_offset():
    # a difference of 0.5 degC is a difference of 0.5 K (SI Brochure 2.3.1)
    assert convert_scale(0.5, "degC", "temperature") == pytest.approx(0.5, abs=1e-15)
    assert convert_scale(2.0, "min", "time") == 120.0


def test_every_spelling_parses_to_its_dimension():
    for dimension, internal in DIMENSIONS.items():
        unit = parse_unit(internal, dimension)
        assert unit.dimension == dimension
        assert internal_unit(dimension) == internal
        assert convert_value(1.0, internal, dimension) == 1.0


def test_micro_sign_and_plain_u_spellings_agree():
    assert convert_value(3.0, "µM", "concentration") == convert_value(3.0, "uM", "concentration")
    assert convert_value(3.0, "µL", "volume") == convert_value(3.0, "uL", "volume")


def test_unit_of_another_dimension_is_named():
    with pytest.raises(InputError, match=r"'mL' is a unit of volume, not of concentration"):
        parse_unit("mL", "concentration", where="solutions.s1.concentration.unit")


def test_misspelt_unit_gets_a_suggestion_and_the_accepted_list():
    with pytest.raises(InputError) as info:
        parse_unit("mol/LL", "concentration", where="x.unit")
    text = str(info.value)
    assert text.startswith("x.unit: unknown unit 'mol/LL' for a concentration.")
    assert "Did you mean 'mol/L'?" in text
    assert "Fix: use one of 'mol/L'" in text


def test_unknown_dimension_is_a_programming_error():
    with pytest.raises(KeyError, match="unknown dimension"):
        parse_unit("s", "duration")


def test_absorbance_and_dimensionless_both_accept_1():
    assert parse_unit("1", "absorbance").dimension == "absorbance"
    assert parse_unit("1", "dimensionless").dimension == "dimensionless"
    assert parse_unit("AU", "absorbance").factor == 1.0
    assert parse_unit("dial", "dimensionless").symbol == "1"


def test_micromolar_with_a_lower_case_litre_is_accepted_like_mmol_per_l():
    """mol/l and mmol/l are accepted; µmol/l was refused with "Did you mean 'mol/l'?", a
    suggestion a million times off."""
    for spelling in ("umol/l", "µmol/l", "μmol/l"):
        assert convert_value(2.0, spelling, "concentration") == pytest.approx(2e-6)
    for spelling in ("µl", "μl"):
        assert convert_value(5.0, spelling, "volume") == pytest.approx(5e-3)


def test_the_fix_lists_every_accepted_spelling():
    """The fix used to stop after eight spellings, leaving out uM, µM and the rest."""
    with pytest.raises(InputError, match=r"Fix: use one of .*'mmol/l', 'umol/L', 'uM', 'µM'"):
        parse_unit("mol per litre", "concentration", where="x.unit")

"""Quantities in the config: "number unit" only, converted with published factors."""
import pytest

from chimeline.errors import ConfigError
from chimeline.units import FOOT, US_SURVEY_FOOT, parse_quantity, split_quantity


@pytest.mark.parametrize("text,kind,si", [
    ("36 ksi", "stress", 36e3 * 6894.757293168361),  # 1 psi = 6894.757 Pa (NIST SP 811, appendix B; from memory)
    ("250 MPa", "stress", 250e6),
    ("250 N/mm^2", "stress", 250e6),
    ("29e6 psi", "stress", 29e6 * 6894.757293168361),
    ("40 ft", "length", 40 * 0.3048),  # the international foot is 0.3048 m exactly (1959 agreement)
    ("100 survey_foot", "length", 100 * 1200 / 3937),  # the US survey foot is 1200/3937 m exactly
    ("12.5 m", "length", 12.5),
    (" 1e3 mm ", "length", 1.0),
])
def test_quantities_convert_with_published_factors(text, kind, si):
    assert parse_quantity(text, kind, None, "k") == pytest.approx(si, rel=1e-12)
    assert FOOT == 0.3048 and US_SURVEY_FOOT == 1200 / 3937


def test_a_bare_number_takes_the_default_unit_or_is_only_checked():
    assert parse_quantity(40, "length", "foot", "k") == pytest.approx(12.192)
    assert parse_quantity("40", "length", None, "k") is None  # checked; the caller knows the unit later


@pytest.mark.parametrize("text", ["10**10**10 m", "2*3 m", "(1) m", "1e999 m", "nan m", "inf", "m", "", "36 ksi ksi",
                                  "1 m; import os", "__import__('os') m", "1" * 40 + " m", "x" * 200])
def test_anything_but_number_and_unit_is_refused_without_evaluating_it(text):
    with pytest.raises(ValueError):
        split_quantity(text)
    with pytest.raises(ConfigError, match="'tank.diameter'"):
        parse_quantity(text, "length", "meter", "tank.diameter")


def test_wrong_dimension_or_unknown_unit():
    with pytest.raises(ConfigError, match="must be a stress"):
        parse_quantity("200 kg", "stress", None, "tank.youngs_modulus")
    with pytest.raises(ConfigError, match="UndefinedUnitError"):
        parse_quantity("3 furlongz", "length", None, "tank.diameter")

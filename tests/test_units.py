"""Unit spellings of laboratory exports: read, converted, and planned per analyte.

Each check names what it is checked against, beside it:

- **pint's own definitions**: factors recomputed here with a plain ``pint.UnitRegistry()``
  and pint's own unit names (``microgram``, ``liter``, ``millimolar``, ``enzyme_unit``,
  ``microkatal``, ``mho``), never through ``foldsift.stats.units``.
- **SI prefixes**: BIPM, The International System of Units (SI Brochure), 9th edition,
  Table 7: kilo 10^3, deci 10^-1, centi 10^-2, milli 10^-3, micro 10^-6, nano 10^-9,
  pico 10^-12, femto 10^-15 (from memory). The unit symbols (µ for micro, L for the litre,
  S for the siemens, °C) are the Brochure's too (from memory).
- **Laboratory spellings**: the forms listed in issue 9 (item 3 and its brief); which of them
  are read, and their display spellings, are this project's choices, stated in the
  ``foldsift.stats.units`` docstring.
"""

from __future__ import annotations

import doctest
import subprocess
import sys
from typing import Any

import pint
import pytest

from foldsift.stats import units
from foldsift.stats.units import conversion_factor, normalise_unit, plan_units

MICRO = "\u00b5"  # MICRO SIGN, the display form
GREEK_MU = "\u03bc"  # GREEK SMALL LETTER MU, as some exports write it

#: The SI prefixes (SI Brochure, 9th ed., Table 7; from memory).
SI_PREFIXES = {
    "k": 1e3,
    "d": 1e-1,
    "c": 1e-2,
    "m": 1e-3,
    "u": 1e-6,
    "n": 1e-9,
    "p": 1e-12,
    "f": 1e-15,
}


@pytest.fixture(scope="module")
def plain_pint() -> Any:
    """pint as shipped: no laboratory definitions, floats."""
    return pint.UnitRegistry()


def pint_factor(registry: Any, source: str, target: str) -> float:
    """value in target = factor × value in source, by pint alone: 1 source ÷ 1 target as a
    pure number (the brief's form, ``registry("1 microgram/liter").to("milligram/liter")``,
    where the target has no number in it)."""
    if not any(ch.isdigit() for ch in target):
        return float(registry(f"1 * ({source})").to(target).magnitude)
    ratio = registry.parse_expression(source) / registry.parse_expression(target)
    return float(ratio.to("dimensionless").magnitude)


# -- reading spellings ----------------------------------------------------------------------

#: (as a laboratory writes it, display spelling). Display: SI symbols (SI Brochure).
SPELLINGS = [
    ("mg/L", "mg/L"),
    ("mg/l", "mg/L"),
    ("MG/L", "mg/L"),
    (" mg / L ", "mg/L"),
    ("ug/L", f"{MICRO}g/L"),
    (f"{MICRO}g/L", f"{MICRO}g/L"),
    (f"{GREEK_MU}g/L", f"{MICRO}g/L"),
    ("mcg/L", f"{MICRO}g/L"),
    ("UG/L", f"{MICRO}g/L"),
    ("ug/kg", f"{MICRO}g/kg"),
    ("mg/kg", "mg/kg"),
    ("ug/g", f"{MICRO}g/g"),
    ("ng/L", "ng/L"),
    ("pg/L", "pg/L"),
    ("mg/dL", "mg/dL"),
    ("g/dL", "g/dL"),
    ("mmol/L", "mmol/L"),
    ("umol/L", f"{MICRO}mol/L"),
    ("mM", "mM"),
    ("IU/L", "IU/L"),
    ("mIU/mL", "mIU/mL"),
    ("U/L", "U/L"),
    ("u/l", "U/L"),
    ("%", "%"),
    ("percent", "%"),
    ("ppm", "ppm"),
    ("ppb", "ppb"),
    ("uS/cm", f"{MICRO}S/cm"),
    (f"{MICRO}S/cm", f"{MICRO}S/cm"),
    ("US/CM", f"{MICRO}S/cm"),
    ("umhos/cm", f"{MICRO}S/cm"),  # the mho is the siemens (pint: mho = siemens)
    ("mS/cm", "mS/cm"),
    ("NTU", "NTU"),
    ("FNU", "FNU"),
    ("pH units", "pH"),
    ("pH", "pH"),
    ("SU", "pH"),
    ("s.u.", "pH"),
    ("deg C", "°C"),
    ("degC", "°C"),
    ("°C", "°C"),
    ("\u2103", "°C"),  # DEGREE CELSIUS, one character
    ("deg F", "°F"),
    ("CFU/100mL", "CFU/100 mL"),
    ("cfu/100 ml", "CFU/100 mL"),
    ("MPN/100 mL", "MPN/100 mL"),
    ("mg/kg dry weight", "mg/kg dw"),
    ("mg/kg dw", "mg/kg dw"),
    ("mg/kg DW", "mg/kg dw"),
    ("mg/kg (d.w.)", "mg/kg dw"),
    ("mg/kg wet weight", "mg/kg ww"),
    ("mg/L as N", "mg/L as N"),
    ("mg kg-1", "mg/kg"),
    ("mg\u00b7kg\u207b\u00b9", "mg/kg"),  # mg·kg⁻¹
    ("milligrams per liter", "mg/L"),
    ("mg/m\u00b3", "mg/m3"),  # mg/m³
    ("x10^9/L", "10^9/L"),
    ("\u00d710\u2079/L", "10^9/L"),  # ×10⁹/L
    ("10^3/uL", f"10^3/{MICRO}L"),
    ("cells/uL", f"cells/{MICRO}L"),
    ("/mm3", "/mm3"),
    ("meq/L", "mEq/L"),
    ("cmol(+)/kg", "cmol(+)/kg"),
    ("mg/kg/day", "mg/kg/d"),
]

#: Spellings not read: ambiguous (ppt: per thousand or per trillion?), unknown, or broken.
UNREAD = ["ppt", "mq/L", "foo", "", "   ", "mg/", "mg//L", "C", "mg%", "10^9", "0/L", "mg/L as"]


@pytest.mark.parametrize(("written", "display"), SPELLINGS)
def test_spelling_read(written: str, display: str) -> None:
    """Issue 9 item 3 spellings → display spelling (SI symbols, SI Brochure)."""
    assert normalise_unit(written) == display


@pytest.mark.parametrize(("written", "display"), SPELLINGS)
def test_display_reads_back_to_itself(written: str, display: str) -> None:
    """The display spelling is a spelling of the same unit (a caller may pass it back)."""
    assert normalise_unit(display) == display
    assert conversion_factor(written, display) == 1.0


@pytest.mark.parametrize("written", UNREAD)
def test_spelling_not_read(written: str) -> None:
    assert normalise_unit(written) is None


def test_every_name_the_spellings_map_to_is_one_pint_defines() -> None:
    """pint's registry (with the module's added units) parses every name the spelling
    tables map to: no spelling is read into a unit pint does not know."""
    registry = units._registry()
    for name, _ in [*units._EXACT.values(), *units._FOLDED.values()]:
        registry.parse_expression(name)


def test_added_units_are_ones_pint_lacks() -> None:
    """The module adds only what pint (as shipped) does not define: pint's own registry
    rejects these names, so they cannot shadow a pint unit."""
    plain = pint.UnitRegistry()
    for definition in units._DEFINITIONS:
        name = definition.split("=")[0].strip()
        with pytest.raises(pint.errors.UndefinedUnitError):
            plain.parse_units(name)


# -- factors ----------------------------------------------------------------------------------

#: (spelling from, spelling to, pint's expression from, pint's expression to).
AGAINST_PINT = [
    ("ug/L", "mg/L", "microgram/liter", "milligram/liter"),
    ("mg/kg", f"{MICRO}g/g", "milligram/kilogram", "microgram/gram"),
    ("ng/L", "pg/L", "nanogram/liter", "picogram/liter"),
    ("mg/dL", "g/L", "milligram/deciliter", "gram/liter"),
    ("g/dL", "mg/L", "gram/deciliter", "milligram/liter"),
    ("umol/L", "mmol/L", "micromole/liter", "millimole/liter"),
    ("mM", "mmol/L", "millimolar", "millimole/liter"),
    ("mS/cm", "uS/cm", "millisiemens/centimeter", "microsiemens/centimeter"),
    ("umhos/cm", "mS/cm", "micromho/centimeter", "millisiemens/centimeter"),
    ("U/L", "ukat/L", "enzyme_unit/liter", "microkatal/liter"),
    ("mg/m3", "ug/L", "milligram/meter**3", "microgram/liter"),
    ("mg/kg/d", "ug/kg/h", "milligram/kilogram/day", "microgram/kilogram/hour"),
    ("x10^9/L", "/uL", "1e9/liter", "1/microliter"),
    ("/mm3", "10^9/L", "1/millimeter**3", "1e9/liter"),
    ("g/100 g", "g/kg", "gram/(100*gram)", "gram/kilogram"),
    ("g/100 mL", "g/dL", "gram/(100*milliliter)", "gram/deciliter"),
    ("CFU/100mL", "CFU/mL", "1/(100*milliliter)", "1/milliliter"),  # CFU: pint has none
    ("mg/kg dw", "ug/g dw", "milligram/kilogram", "microgram/gram"),
]


@pytest.mark.parametrize(("source", "target", "pint_source", "pint_target"), AGAINST_PINT)
def test_factor_is_pints(
    plain_pint: Any,
    source: str,
    target: str,
    pint_source: str,
    pint_target: str,
) -> None:
    """Factor against pint's own definitions, computed here with pint's own unit names."""
    expected = pint_factor(plain_pint, pint_source, pint_target)
    assert conversion_factor(source, target) == pytest.approx(expected, rel=1e-14)
    assert conversion_factor(target, source) == pytest.approx(1 / expected, rel=1e-14)


@pytest.mark.parametrize(("prefix", "power"), SI_PREFIXES.items())
@pytest.mark.parametrize("unit", ["g", "L", "mol", "S", "m"])
def test_prefixes_are_the_si_prefixes(prefix: str, power: float, unit: str) -> None:
    """SI Brochure, 9th ed., Table 7: 1 prefix-unit = power × unit, exactly (as the float
    nearest to the power of ten)."""
    assert conversion_factor(prefix + unit, unit) == power
    assert conversion_factor(f"{MICRO}{unit}", unit) == 1e-6


def test_brief_factors_exact() -> None:
    """The factors named in issue 9's brief, exact: SI prefixes (SI Brochure, Table 7):
    10^-3 g / 10^3 g = 10^-6 g / 1 g; micro/milli = 10^-3; nano/pico = 10^3; deci = 10^-1."""
    assert conversion_factor("mg/kg", f"{MICRO}g/g") == 1.0
    assert conversion_factor(f"{MICRO}g/L", "mg/L") == 0.001
    assert conversion_factor("ng/L", "pg/L") == 1000.0
    assert conversion_factor("mg/dL", "g/L") == 0.01


def test_parts_per_follow_the_si_prefixes() -> None:
    """ppm = 10^-6 and ppb = 10^-9 (parts per million, per billion; SI prefixes micro and
    nano, SI Brochure Table 7), so 1 ppm = 1000 ppb; pint's own ppm is 10^-6 too."""
    assert conversion_factor("ppm", "ppb") == 1000.0
    assert conversion_factor("ppb", "ppm") == 0.001
    assert pint.UnitRegistry()("1 ppm").to("dimensionless").magnitude == pytest.approx(1e-6)


#: Pairs that must not convert, and why.
APART = [
    ("mg/L", "mmol/L"),  # mass vs amount of substance: needs a molar mass
    ("mg/L", "mM"),
    ("mg/L", "uS/cm"),  # concentration vs conductivity
    ("mg/L", "mg/kg"),  # mass per volume vs mass per mass
    ("mEq/L", "mmol/L"),  # equivalents vs moles: needs the charge
    ("IU/L", "U/L"),  # an international unit is defined per substance
    ("%", "mg/kg"),  # % of what? the export does not say
    ("%", "ppm"),
    ("ppm", "mg/L"),  # ppm: mg/L in water, mg/kg in soil
    ("ppm", "mg/kg"),
    ("mg/kg", "mL/L"),  # mass fraction vs volume fraction (pint: both dimensionless)
    ("mg/kg dw", "mg/kg"),  # dry weight vs unstated basis
    ("mg/kg dw", "mg/kg ww"),
    ("mg/L as N", "mg/L"),
    ("CFU/100 mL", "MPN/100 mL"),  # different counting methods
    ("NTU", "FNU"),  # different turbidity methods
    ("°C", "°F"),  # an offset, not a factor
    ("pH", "%"),
    ("mq/L", "mg/L"),  # unknown spelling
    ("mq/L", "mq/L"),
    ("ppt", "ppb"),
]


@pytest.mark.parametrize(("source", "target"), APART)
def test_pairs_that_do_not_convert(source: str, target: str) -> None:
    assert conversion_factor(source, target) is None
    assert conversion_factor(target, source) is None


def test_pint_alone_would_mix_fractions_and_offsets(
    plain_pint: Any,
) -> None:
    """Why two of the refusals above are the module's rules, not pint's: pint converts a
    mass fraction into a volume fraction (both dimensionless: 1 mg/kg = 0.001 mL/L), and 0 °C
    into 32 °F (an offset; pint's definitions)."""
    assert pint_factor(plain_pint, "milligram/kilogram", "milliliter/liter") == pytest.approx(1e-3)
    zero = plain_pint.Quantity(0, "degree_Celsius").to("degree_Fahrenheit").magnitude
    assert zero == pytest.approx(32.0)


def test_temperature_converts_to_itself() -> None:
    assert conversion_factor("deg C", "°C") == 1.0


def test_molar_mass_is_not_assumed() -> None:
    """Documented in conversion_factor: mass ↔ molar needs a molar mass."""
    assert "molar mass" in (conversion_factor.__doc__ or "")


# -- one analyte's plan -------------------------------------------------------------------------


def test_plan_one_unit() -> None:
    plan = plan_units(["mg/L"] * 3)
    assert plan.target == "mg/L"
    assert plan.targets == {"mg/L": "mg/L"}
    assert plan.factors == {"mg/L": 1.0}
    assert plan.apart == ()
    assert plan.groups == ("mg/L",)
    assert plan.assumed == 0


def test_plan_target_is_the_more_frequent() -> None:
    """mg/L on two rows, µg/L on one: target mg/L, µg/L × 10^-3 (SI: micro/milli)."""
    plan = plan_units(["ug/L", "mg/L", "mg/L"])
    assert plan.target == "mg/L"
    assert plan.target_of("ug/L") == "mg/L"
    assert plan.factor_of("ug/L") == 0.001
    assert plan.factor_of("mg/L") == 1.0
    assert plan.canonical == {"ug/L": f"{MICRO}g/L", "mg/L": "mg/L"}
    assert plan.apart == ()
    other = plan_units(["ug/L", "ug/L", "mg/L"])
    assert other.target == f"{MICRO}g/L"
    assert other.factor_of("mg/L") == 1000.0


def test_plan_counts_spellings_of_one_unit_together() -> None:
    """mg/l and MG/L are one unit (2 rows), so it beats µg/L (1 row) though no one spelling
    does."""
    plan = plan_units([f"{MICRO}g/L", "mg/l", "MG/L"])
    assert plan.target == "mg/L"
    assert plan.targets == {f"{MICRO}g/L": "mg/L", "mg/l": "mg/L", "MG/L": "mg/L"}
    assert plan.factor_of(f"{MICRO}g/L") == 0.001


def test_plan_splits_units_that_do_not_convert() -> None:
    """mg/L, µg/L and µS/cm: mg/L for the first two, µS/cm apart."""
    plan = plan_units(["mg/L", "ug/L", "mg/L", "uS/cm"])
    assert plan.target == "mg/L"
    assert plan.targets == {"mg/L": "mg/L", "ug/L": "mg/L", "uS/cm": f"{MICRO}S/cm"}
    assert plan.factors == {"mg/L": 1.0, "ug/L": 0.001, "uS/cm": 1.0}
    assert plan.apart == ("uS/cm",)
    assert plan.groups == ("mg/L", f"{MICRO}S/cm")


def test_plan_each_apart_group_has_its_own_most_frequent_target() -> None:
    """µS/cm (1 row) and mS/cm (2 rows) are apart from mg/L (4 rows): their target is mS/cm,
    µS/cm × 10^-3 (SI: micro/milli)."""
    plan = plan_units(["mg/L"] * 4 + ["uS/cm", "mS/cm", "mS/cm"])
    assert plan.target == "mg/L"
    assert plan.target_of("uS/cm") == "mS/cm"
    assert plan.factor_of("uS/cm") == 0.001
    assert plan.apart == ("uS/cm", "mS/cm")
    assert plan.groups == ("mg/L", "mS/cm")


def test_plan_main_group_is_the_one_with_most_rows() -> None:
    """µS/cm is the single most frequent unit (3 rows), but mg/L and µg/L convert into each
    other and have 4 rows together: that group is the analyte's main one."""
    plan = plan_units(["uS/cm"] * 3 + ["mg/L", "ug/L"] * 2)
    assert plan.target == "mg/L"
    assert plan.apart == ("uS/cm",)
    assert plan.groups == ("mg/L", f"{MICRO}S/cm")


def test_plan_rows_without_unit_and_one_unit() -> None:
    """Rows with no unit (None or blank) are in the analyte's only unit, and counted."""
    plan = plan_units([None, "mg/L", "", "mg/l", None])
    assert plan.target == "mg/L"
    assert plan.targets == {None: "mg/L", "mg/L": "mg/L", "": "mg/L", "mg/l": "mg/L"}
    assert set(plan.factors.values()) == {1.0}
    assert plan.assumed == 3
    assert plan.apart == ()


def test_plan_rows_without_unit_count_towards_the_only_unit() -> None:
    plan = plan_units([None, None, "ug/L"])
    assert plan.target == f"{MICRO}g/L"
    assert plan.target_of(None) == f"{MICRO}g/L"


def test_plan_rows_without_unit_and_two_units() -> None:
    """With mg/L and µg/L (convertible, but 1000× apart) rows with no unit cannot be placed:
    they are a group of their own, "unit not given" (target None)."""
    plan = plan_units([None, "mg/L", "ug/L", "mg/L"])
    assert plan.target == "mg/L"
    assert plan.target_of(None) is None
    assert plan.factor_of(None) == 1.0
    assert plan.target_of("ug/L") == "mg/L"
    assert plan.apart == (None,)
    assert plan.groups == ("mg/L", None)
    assert plan.assumed == 0


def test_plan_no_unit_at_all() -> None:
    plan = plan_units([None, "", None])
    assert plan.target is None
    assert plan.targets == {None: None, "": None}
    assert plan.groups == (None,)
    assert plan.apart == ()
    assert plan.assumed == 0
    assert plan_units([]).groups == ()


@pytest.mark.parametrize(
    ("rows", "target"),
    [
        (["ug/L", "mg/L"], f"{MICRO}g/L"),
        (["mg/L", "ug/L"], "mg/L"),
        (["mg/L", "ug/L", "ug/L", "mg/L"], "mg/L"),
        (["uS/cm", "mg/L"], f"{MICRO}S/cm"),  # tie between groups: the first seen
    ],
)
def test_plan_ties_go_to_the_first_seen(rows: list[str], target: str) -> None:
    assert plan_units(rows).target == target


def test_plan_unreadable_spelling_is_its_own_group() -> None:
    """An unknown spelling keeps its rows apart under the spelling as written."""
    plan = plan_units(["mg/L", "mg/L", "mq/L", " mq/L "])
    assert plan.target == "mg/L"
    assert plan.target_of("mq/L") == "mq/L"
    assert plan.target_of(" mq/L ") == "mq/L"
    assert plan.factor_of("mq/L") == 1.0
    assert plan.canonical["mq/L"] is None
    assert plan.unreadable == ("mq/L",)
    assert plan.apart == ("mq/L", " mq/L ")
    assert plan.groups == ("mg/L", "mq/L")


def test_plan_readable_units_come_before_unreadable_ones() -> None:
    plan = plan_units(["mq/L"] * 5 + ["mg/L"])
    assert plan.target == "mg/L"
    assert plan.groups == ("mg/L", "mq/L")


def test_plan_keeps_the_spelling_as_written() -> None:
    """For a caller that names outcomes as the export spells them: per unit its most
    frequent spelling (ties: the first seen); rows with no unit add no spelling."""
    plan = plan_units(["umol/L", f"{MICRO}mol/L", "umol/L", "mmol/l", "mmol/L", None])
    assert plan.target == f"{MICRO}mol/L"
    assert plan.spelled == {f"{MICRO}mol/L": "umol/L", "mmol/L": "mmol/l"}
    assert plan_units([None, "mg/L"]).spelled == {"mg/L": "mg/L"}
    assert plan_units(["mq/L "]).spelled == {"mq/L": "mq/L"}


def test_plan_factors_are_conversion_factors() -> None:
    spellings = ["mg/L", "ug/L", "ng/L", "g/dL", "mg/dL", "uS/cm", "mS/cm", "mmol/L", None]
    plan = plan_units(spellings * 3 + ["mg/L"])
    for spelling in spellings:
        target = plan.target_of(spelling)
        if spelling is not None and target is not None:
            assert plan.factor_of(spelling) == conversion_factor(spelling, target)


def test_plan_reads_each_distinct_spelling_once(monkeypatch: pytest.MonkeyPatch) -> None:
    """Per analyte the library is asked per distinct spelling, not per row."""
    read: list[str] = []
    compared: list[tuple[str, str]] = []
    original_read, original_compare = units.normalise_unit, units.conversion_factor

    def counting_read(text: str) -> str | None:
        read.append(text)
        return original_read(text)

    def counting_compare(source: str, target: str) -> float | None:
        compared.append((source, target))
        return original_compare(source, target)

    monkeypatch.setattr(units, "normalise_unit", counting_read)
    monkeypatch.setattr(units, "conversion_factor", counting_compare)
    plan = plan_units(["mg/L"] * 50_000 + ["ug/L"] * 20_000 + ["uS/cm"] * 10 + [None] * 5)
    assert sorted(read) == ["mg/L", "uS/cm", "ug/L"]
    assert len(compared) <= 3
    assert plan.factor_of("ug/L") == 0.001


# -- the module ------------------------------------------------------------------------------


def test_docstring_examples() -> None:
    assert doctest.testmod(units).failed == 0


def test_pint_is_imported_only_to_convert() -> None:
    """Importing the statistics core, the long-table reader and this module, and reading
    spellings, loads no pint (``foldsift --help`` stays fast); converting does."""
    probe = (
        "import sys\n"
        "import foldsift.stats.scan, foldsift.stats.load, foldsift.stats.long\n"
        "from foldsift.stats import units\n"
        "units.normalise_unit('ug/L')\n"
        "units.plan_units(['mg/L', None])\n"
        "assert 'pint' not in sys.modules, 'pint imported'\n"
        "units.conversion_factor('ug/L', 'mg/L')\n"
        "assert 'pint' in sys.modules\n"
    )
    subprocess.run([sys.executable, "-c", probe], check=True)

"""Units of measurement as laboratory exports write them: read, compared and converted.

One unit is written many ways (``mg/L``, ``mg/l``, ``MG/L``; ``ug/L``, ``µg/L``, ``μg/L``,
``mcg/L``). ``normalise_unit`` reads a spelling into one display spelling,
``conversion_factor`` gives the factor between two spellings, and ``plan_units`` decides for
one analyte's rows which unit each row is reported in and by what its values and limits are
multiplied.

The units and every factor between them are pint's (SI prefixes; gram, litre, mole, molar,
siemens, mho, metre, katal, enzyme unit, minute, hour, day, degree Celsius and Fahrenheit).
This module only maps laboratory spellings onto pint's names, and defines as dimensions of
their own the units pint lacks or that must convert only within their kind: international
unit, colony-forming unit, most probable number, NTU, FNU, pH, percent, equivalent, and a
"part" whose SI prefixes micro and nano give ppm and ppb. pint is imported on first use.

Rules, erring towards keeping rows apart (a wrong conversion is silent; a separate outcome
is seen):

- Case: a spelling is read case-sensitively first, then without case (``MG/L`` is mg/L,
  ``US/CM`` µS/cm; ``mM`` is millimolar, ``MM`` millimetre). ``µ`` (micro sign), ``μ``
  (Greek mu), ``u`` and ``mc`` all mean micro. Seconds are not read (``s`` is siemens).
- Mass and amount of substance do not convert into each other (``mg/L`` and ``mmol/L``:
  that needs a molar mass), nor equivalents and moles (that needs the charge), nor ``IU``
  and ``U`` (an international unit is defined per substance).
- ``%`` converts only to itself (of mass, of volume, of saturation? the export does not
  say); ``ppm`` and ``ppb`` only into each other (ppm means mg/L in water, mg/kg in soil);
  ``ppt`` (thousand or trillion?) is not read.
- Ratios convert only between ratios of one quantity: ``mg/kg`` ↔ ``µg/g`` ↔ ``g/100 g``,
  never ``mg/kg`` ↔ ``mL/L`` (pint calls both dimensionless).
- A basis is part of the unit: ``mg/kg dw`` (``dry weight``, ``d.w.``, ...) converts to
  ``µg/g dw`` but not to ``mg/kg`` or ``mg/kg ww``; likewise ``mg/L as N``.
- Temperatures convert only to themselves (°C to °F is an offset, not a factor).
- Counts per volume convert by the volume: ``CFU/100 mL`` ↔ ``CFU/mL``; ``10^9/L`` ↔
  ``/µL`` ↔ ``cells/µL``; CFU, MPN, NTU and FNU never into each other.
"""

from __future__ import annotations

import re
import unicodedata
from collections import Counter
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from fractions import Fraction
from functools import lru_cache
from typing import Any

__all__ = ["UnitPlan", "conversion_factor", "normalise_unit", "plan_units"]

#: Units added to pint's registry, each a dimension of its own (see the module docstring).
_DEFINITIONS = (
    "international_unit = [international_unit]",
    "colony_forming_unit = [colony_forming_unit]",
    "most_probable_number = [most_probable_number]",
    "nephelometric_turbidity_unit = [nephelometric_turbidity]",
    "formazin_nephelometric_unit = [formazin_nephelometric_turbidity]",
    "ph_unit = [ph]",
    "lab_percent = [percent_of_an_unstated_whole]",
    "lab_part = [part_of_an_unstated_whole]",
    "lab_equivalent = [equivalent]",
)

#: An atom: pint's name and the display symbol.
_Atom = tuple[str, str]

#: SI prefixes as laboratories write them → (pint's prefix, display).
_PREFIXES: dict[str, tuple[str, str]] = {
    "": ("", ""),
    "k": ("kilo", "k"),
    "d": ("deci", "d"),
    "c": ("centi", "c"),
    "m": ("milli", "m"),
    "u": ("micro", "µ"),
    "mc": ("micro", "µ"),
    "n": ("nano", "n"),
    "p": ("pico", "p"),
    "f": ("femto", "f"),
}

#: Symbols that take the prefixes above → (pint's name, display symbol).
_PREFIXED: dict[str, _Atom] = {
    "g": ("gram", "g"),
    "L": ("liter", "L"),
    "l": ("liter", "L"),
    "mol": ("mole", "mol"),
    "molc": ("lab_equivalent", "mol(+)"),
    "S": ("siemens", "S"),
    "mho": ("mho", "S"),
    "mhos": ("mho", "S"),
    "m": ("meter", "m"),
    "U": ("enzyme_unit", "U"),
    "IU": ("international_unit", "IU"),
    "kat": ("katal", "kat"),
    "Eq": ("lab_equivalent", "Eq"),
    "eq": ("lab_equivalent", "Eq"),
}

#: Molar (mol/L): read only as written (``mM``), since without case ``mm`` is a millimetre.
_MOLAR: _Atom = ("molar", "M")

#: Symbols read without prefixes.
_PLAIN: dict[str, _Atom] = {
    "min": ("minute", "min"),
    "h": ("hour", "h"),
    "hr": ("hour", "h"),
    "hrs": ("hour", "h"),
    "hour": ("hour", "h"),
    "hours": ("hour", "h"),
    "d": ("day", "d"),
    "day": ("day", "d"),
    "days": ("day", "d"),
    "CFU": ("colony_forming_unit", "CFU"),
    "MPN": ("most_probable_number", "MPN"),
    "NTU": ("nephelometric_turbidity_unit", "NTU"),
    "FNU": ("formazin_nephelometric_unit", "FNU"),
    "cells": ("count", "cells"),
    "cell": ("count", "cells"),
    "%": ("lab_percent", "%"),
    "percent": ("lab_percent", "%"),
    "ppm": ("microlab_part", "ppm"),
    "ppb": ("nanolab_part", "ppb"),
}

#: Written-out names (read without case): prefix words × unit words.
_PREFIX_WORDS = ("", "kilo", "deci", "centi", "milli", "micro", "nano", "pico", "femto")
_UNIT_WORDS: dict[str, tuple[str, str]] = {
    "gram": ("gram", "g"),
    "gramme": ("gram", "g"),
    "liter": ("liter", "L"),
    "litre": ("liter", "L"),
    "mole": ("mole", "mol"),
    "meter": ("meter", "m"),
    "metre": ("meter", "m"),
    "siemens": ("siemens", "S"),
}

_PH = ("ph_unit", "pH")
_WHOLE = re.compile(
    r"^(?:(?P<ph>ph|ph[\s-]?units?|s\.?\s?u\.?|std\.?\s?units?|standard\s+units?)"
    r"|(?:°|deg(?:rees?)?\.?)\s*(?P<deg>[cf])(?:elsius|ahrenheit)?"
    r"|(?P<word>celsius|fahrenheit))$",
    re.IGNORECASE,
)
_BASIS_WORDS = (
    r"(?P<dw>dry(?:\s*(?:weight|wt\.?|mass|matter))?|d\.?\s?w\.?|dwt)"
    r"|(?P<ww>(?:wet|fresh)(?:\s*(?:weight|wt\.?|mass))?|w\.?\s?w\.?|f\.?\s?w\.?)"
    r"|as\s+(?P<as>[A-Za-z0-9][A-Za-z0-9-]*)"
)
_BASIS = re.compile(rf"(?:\s*\(|[\s,_-]+)\s*(?:{_BASIS_WORDS})\s*\)?$", re.IGNORECASE)
_TOKEN = re.compile(
    r"(?P<power>(?:[x×]\s*)?10\s*(?:\^|\*\*?|[eE])\s*(?P<ten>[-+]?\d+))"
    r"|(?P<number>\d+(?:\.\d+)?)"
    r"|(?P<atom>[A-Za-z%]+)(?:\^|\*\*)?(?P<exp>[-+]?\d+)?"
    r"|(?P<gap>[\s·⋅*]+)"
)


def _atom_tables() -> tuple[dict[str, _Atom], dict[str, _Atom]]:
    """The atoms read as written, and those read without case (a lower-case spelling that
    two different atoms share is left out of the second)."""
    exact: dict[str, _Atom] = dict(_PLAIN)
    for written, (prefix, shown) in _PREFIXES.items():
        for symbol, (name, display) in _PREFIXED.items():
            exact.setdefault(written + symbol, (prefix + name, shown + display))
    words = {
        prefix + word + plural: (prefix + name, _PREFIXES[_prefix_symbol(prefix)][1] + display)
        for prefix in _PREFIX_WORDS
        for word, (name, display) in _UNIT_WORDS.items()
        for plural in ("", "s")
    }
    folded: dict[str, _Atom] = {}
    clashes: set[str] = set()
    for written, atom in [*exact.items(), *words.items()]:
        key = written.lower()
        if folded.setdefault(key, atom) != atom:
            clashes.add(key)
    for written, (prefix, shown) in _PREFIXES.items():
        exact[written + "M"] = (prefix + _MOLAR[0], shown + _MOLAR[1])
    return exact, {k: v for k, v in folded.items() if k not in clashes}


def _prefix_symbol(word: str) -> str:
    """The written symbol of a prefix word (``micro`` → ``u``)."""
    return next(s for s, (name, _) in _PREFIXES.items() if name == word and s != "mc")


_EXACT, _FOLDED = _atom_tables()


@dataclass(frozen=True)
class _Term:
    """One side of a unit (numerator or denominator): counts (``100``, ``10^9``) and atoms
    with their powers."""

    counts: tuple[tuple[str, str], ...] = ()
    atoms: tuple[tuple[_Atom, int], ...] = ()

    def expression(self) -> str:
        parts = [written for written, _ in self.counts]
        parts += [name if power == 1 else f"{name}**{power}" for (name, _), power in self.atoms]
        return " * ".join(parts) or "1"

    def display(self, joiner: str) -> str:
        counts = " ".join(shown for _, shown in self.counts)
        atoms = joiner.join(
            shown if power == 1 else f"{shown}{power}" for (_, shown), power in self.atoms
        )
        return " ".join(part for part in (counts, atoms) if part)


@dataclass(frozen=True)
class _Unit:
    """A unit read from a spelling: its display and pint expressions, and its basis."""

    display: str
    expression: str
    numerator: str
    basis: str | None


_SUPERSCRIPTS = re.compile("[⁺⁻⁰¹²³⁴⁵⁶⁷⁸⁹]+")
_FROM_SUPERSCRIPT = str.maketrans("⁺⁻⁰¹²³⁴⁵⁶⁷⁸⁹", "+-0123456789")


def _clean(text: str) -> str:
    """Powers written as superscripts made ``^`` powers (``10⁹`` → ``10^9``, ``m³`` →
    ``m^3``), compatibility forms folded (``µ`` → ``μ``, ``℃`` → ``°C``), then micro written
    ``u``, minus signs ``-``, charge-moles ``molc``, ``per`` as ``/``, and spaces collapsed."""
    text = _SUPERSCRIPTS.sub(lambda m: "^" + m.group().translate(_FROM_SUPERSCRIPT), text)
    text = unicodedata.normalize("NFKC", text)
    for old, new in (("μ", "u"), ("−", "-"), ("–", "-"), ("mol(+)", "molc"), ("mol+", "molc")):
        text = text.replace(old, new)
    text = re.sub(r"\s+per\s+", "/", text, flags=re.IGNORECASE)
    return " ".join(text.split())


def _split_basis(text: str) -> tuple[str, str | None]:
    """The unit and its basis (``dw``, ``ww``, ``as N``) written after it, if any."""
    found = _BASIS.search(text)
    if found is None or found.start() == 0:
        return text, None
    if found.group("dw") is not None:
        basis = "dw"
    elif found.group("ww") is not None:
        basis = "ww"
    else:
        basis = f"as {found.group('as')}"
    return text[: found.start()].strip(), basis


def _whole(text: str) -> _Unit | None:
    """pH and temperatures, read only as a whole spelling."""
    found = _WHOLE.match(text)
    if found is None:
        return None
    if found.group("ph") is not None:
        name, display = _PH
    else:
        letter = (found.group("deg") or found.group("word"))[0].lower()
        name, display = ("degree_Celsius", "°C") if letter == "c" else ("degree_Fahrenheit", "°F")
    return _Unit(display, name, name, None)


def _atom(written: str) -> _Atom | None:
    return _EXACT.get(written) or _FOLDED.get(written.lower())


def _read_part(part: str) -> tuple[_Term, _Term] | None:
    """One ``/``-separated part: what it puts above and below the line (atoms with a negative
    power go below), or None when a piece of it is not a unit."""
    counts: list[tuple[str, str]] = []
    above: list[tuple[_Atom, int]] = []
    below: list[tuple[_Atom, int]] = []
    position = 0
    while position < len(part):
        token = _TOKEN.match(part, position)
        if token is None:
            return None
        position = token.end()
        if token.group("power") is not None:
            power = int(token.group("ten"))
            if power != 0:
                counts.append((f"10**{power}", f"10^{power}"))
        elif token.group("number") is not None:
            number = token.group("number")
            if float(number) == 0:
                return None
            if float(number) != 1:
                counts.append((number, number))
        elif token.group("atom") is not None:
            atom = _atom(token.group("atom"))
            power = int(token.group("exp") or 1)
            if atom is None or power == 0:
                return None
            (above if power > 0 else below).append((atom, abs(power)))
    return _Term(tuple(counts), tuple(above)), _Term((), tuple(below))


def _read(text: str) -> _Unit | None:
    """The unit a cleaned spelling (without basis) names, or None."""
    whole = _whole(text)
    if whole is not None:
        return whole
    sides = _sides(text)
    if sides is None:
        return None
    top, bottom = sides
    display = top.display("·")
    if bottom.counts or bottom.atoms:
        display += "/" + bottom.display("/")
    expression = f"({top.expression()}) / ({bottom.expression()})"
    return _Unit(display, expression, top.expression(), None)


def _sides(text: str) -> tuple[_Term, _Term] | None:
    """Above and below the line of ``a/b/c`` (``a`` over ``b·c``), or None when a part is not
    a unit, is empty after a ``/``, or when there is no unit but numbers."""
    pieces = text.split("/")
    if not all(piece.strip() for piece in pieces[1:]):
        return None  # "mg/" or "mg//L"
    read = []
    for piece in pieces:
        part = _read_part(piece)
        if part is None:
            return None
        read.append(part)
    top = _merge([read[0][0], *(below for _, below in read[1:])])
    bottom = _merge([read[0][1], *(above for above, _ in read[1:])])
    if not top.atoms and not bottom.atoms:
        return None
    return top, bottom


def _merge(terms: Sequence[_Term]) -> _Term:
    return _Term(
        tuple(c for term in terms for c in term.counts),
        tuple(a for term in terms for a in term.atoms),
    )


@lru_cache(maxsize=4096)
def _parse(text: str) -> _Unit | None:
    cleaned = _clean(text)
    if not cleaned:
        return None
    body, basis = _split_basis(cleaned)
    unit = _read(body)
    if unit is None:
        return None
    if basis is None:
        return unit
    return _Unit(f"{unit.display} {basis}", unit.expression, unit.numerator, basis)


def normalise_unit(text: str) -> str | None:
    """The display spelling of a unit as a laboratory writes it, or None when it cannot be
    read (an unknown or ambiguous spelling).

    >>> normalise_unit("ug/l"), normalise_unit("MG/L"), normalise_unit("CFU/100mL")
    ('µg/L', 'mg/L', 'CFU/100 mL')
    >>> normalise_unit("mg/kg dry weight"), normalise_unit("SU"), normalise_unit("ppt")
    ('mg/kg dw', 'pH', None)

    The display spelling reads back to itself.
    """
    unit = _parse(text)
    return None if unit is None else unit.display


@lru_cache(maxsize=1)
def _registry() -> Any:
    """pint's registry with the laboratory units of ``_DEFINITIONS``, made once. Its numbers
    are fractions, so a factor is exact until it is returned as a float (micro → nano is
    1000, not 999.9999999999999).

    Typed ``Any``: pint's ``UnitRegistry`` takes a type argument from 0.25.1 on and none
    before, so no one annotation passes ``mypy --strict`` on every supported pint."""
    import pint

    registry: Any = pint.UnitRegistry(on_redefinition="raise", non_int_type=Fraction)
    for definition in _DEFINITIONS:
        registry.define(definition)
    return registry


@lru_cache(maxsize=4096)
def _factor(source: _Unit, target: _Unit) -> float | None:
    """value in ``target`` = factor × value in ``source``, by pint; None when the two do not
    convert (see the module docstring)."""
    if source.basis != target.basis:
        return None
    if source.display == target.display:
        return 1.0
    from pint.errors import PintError

    registry = _registry()
    try:
        start = registry.parse_expression(source.expression)
        end = registry.parse_expression(target.expression)
        if start.dimensionality != end.dimensionality:
            return None
        if start.dimensionless and (
            registry.parse_expression(source.numerator).dimensionality
            != registry.parse_expression(target.numerator).dimensionality
        ):
            return None
        if registry.Quantity(0, start.units).to(end.units).magnitude != 0.0:
            return None  # an offset scale (°C, °F): no factor
        return float(start.to(end.units).magnitude / end.magnitude)
    except PintError:
        return None


def conversion_factor(from_unit: str, to_unit: str) -> float | None:
    """The factor f with value in ``to_unit`` = f × value in ``from_unit``, from pint's
    definitions; None when either spelling cannot be read or the two do not convert.

    Units of different dimensions never convert (``mg/L`` and ``µS/cm``), and neither do mass
    and amount of substance (``mg/L`` and ``mmol/L``): that needs the analyte's molar mass,
    which a unit column does not give. Nor do ``%`` and other units, ``IU`` and ``U``,
    different bases (``mg/kg dw`` and ``mg/kg``), or temperatures of different scales.

    >>> conversion_factor("ug/L", "mg/L"), conversion_factor("mg/kg", "µg/g")
    (0.001, 1.0)
    >>> conversion_factor("mg/L", "mmol/L") is None
    True
    """
    source, target = _parse(from_unit), _parse(to_unit)
    if source is None or target is None:
        return None
    return _factor(source, target)


# -- one analyte's rows ---------------------------------------------------------------------


@dataclass(frozen=True)
class UnitPlan:
    """How one analyte's rows are reported, per distinct unit spelling as written (``None``
    or blank: no unit given).

    Rows whose units convert into each other form one group, reported in the group's most
    frequent unit (ties: the first seen), their values and limits multiplied by the
    spelling's factor. The main group is the one with the most rows (ties: the first seen);
    every other group is kept apart as an outcome of its own. A spelling pint cannot read is a
    group of its own, reported under its spelling as written. Rows with no unit are taken to
    be in the analyte's unit when it has exactly one (``assumed`` counts them), and are
    otherwise a group of their own with no unit (target ``None``: "unit not given").
    """

    #: The main group's unit (None when no row gives a unit).
    target: str | None
    #: Per spelling: its display spelling (None: not given or not readable).
    canonical: Mapping[str | None, str | None]
    #: Per spelling: the unit its rows are reported in (None: "unit not given").
    targets: Mapping[str | None, str | None]
    #: Per spelling: value in its target = factor × value as written.
    factors: Mapping[str | None, float]
    #: Spellings whose rows are not in the main group, in the order first seen.
    apart: tuple[str | None, ...]
    #: The units reported, main group first (None: the group "unit not given").
    groups: tuple[str | None, ...]
    #: Rows with no unit taken to be in the analyte's only unit.
    assumed: int
    #: Spellings pint could not read (each kept apart under its own spelling).
    unreadable: tuple[str, ...]
    #: Per unit (display spelling): its most frequent spelling as written (ties: the first
    #: seen), for a caller that names outcomes as the export spells them (``umol/L``).
    spelled: Mapping[str, str]

    def target_of(self, spelling: str | None) -> str | None:
        """The unit the rows written in ``spelling`` are reported in."""
        return self.targets[spelling]

    def factor_of(self, spelling: str | None) -> float:
        """The factor that takes values (and limits) written in ``spelling`` to its target."""
        return self.factors[spelling]


def _given(spelling: str | None) -> str | None:
    """A spelling with spaces collapsed; None when it is missing or blank."""
    if spelling is None:
        return None
    text = " ".join(spelling.split())
    return text or None


def _groups(rows: Mapping[str, int]) -> list[tuple[str, dict[str, float]]]:
    """Readable units (display → rows, in the order first seen) grouped by convertibility:
    per group its target and each unit's factor to it; largest group first."""
    first_seen = {unit: index for index, unit in enumerate(rows)}
    groups: list[tuple[str, dict[str, float]]] = []
    for unit in sorted(rows, key=lambda u: (-rows[u], first_seen[u])):
        for target, members in groups:
            factor = conversion_factor(unit, target)
            if factor is not None:
                members[unit] = factor
                break
        else:
            groups.append((unit, {unit: 1.0}))
    groups.sort(
        key=lambda group: (
            -sum(rows[u] for u in group[1]),
            min(first_seen[u] for u in group[1]),
        )
    )
    return groups


def _row_units(
    counts: Mapping[str | None, int],
) -> tuple[dict[str | None, str | None], dict[str | None, str | None], set[str]]:
    """Per spelling its display spelling, and its unit (the display spelling, or the
    spelling as written when pint cannot read it; None when no unit is given); and the set of
    readable units."""
    given = {spelling: _given(spelling) for spelling in counts}
    canonical = {s: None if g is None else normalise_unit(g) for s, g in given.items()}
    unit_of = {s: canonical[s] or given[s] for s in counts}
    return canonical, unit_of, {unit for unit in canonical.values() if unit is not None}


def _row_counts(
    counts: Mapping[str | None, int], unit_of: Mapping[str | None, str | None]
) -> tuple[Counter[str], int]:
    """Rows per unit (in the order first seen) and rows with no unit."""
    rows: Counter[str] = Counter()
    unitless = 0
    for spelling, count in counts.items():
        unit = unit_of[spelling]
        if unit is None:
            unitless += count
        else:
            rows[unit] += count
    return rows, unitless


def _reported(
    rows: Mapping[str, int], readable: set[str], unit_of: Mapping[str | None, str | None]
) -> tuple[list[str | None], dict[str | None, str | None], dict[str | None, float]]:
    """The units reported (readable groups, largest first, then each unreadable spelling),
    and per spelling its target and factor (None and 1 for a spelling with no unit)."""
    groups = _groups({unit: n for unit, n in rows.items() if unit in readable})
    groups += [(unit, {unit: 1.0}) for unit in rows if unit not in readable]
    into = {unit: (target, f) for target, members in groups for unit, f in members.items()}
    targets: dict[str | None, str | None] = {}
    factors: dict[str | None, float] = {}
    for spelling, unit in unit_of.items():
        targets[spelling], factors[spelling] = (None, 1.0) if unit is None else into[unit]
    return [target for target, _ in groups], targets, factors


def _spelled(
    counts: Mapping[str | None, int], unit_of: Mapping[str | None, str | None]
) -> dict[str, str]:
    """Per unit, its most frequent spelling as written (spaces collapsed; ties: the first
    seen)."""
    rows: Counter[tuple[str, str]] = Counter()
    for spelling, count in counts.items():
        written, unit = _given(spelling), unit_of[spelling]
        if written is not None and unit is not None:
            rows[unit, written] += count
    spelled: dict[str, str] = {}
    for (unit, written), count in rows.items():
        if unit not in spelled or count > rows[unit, spelled[unit]]:
            spelled[unit] = written
    return spelled


def plan_units(units: Sequence[str | None]) -> UnitPlan:
    """The plan for one analyte's rows, given each row's unit spelling in order (see
    ``UnitPlan``). pint is asked once per distinct spelling, so callers map rows through
    ``targets`` and ``factors``.

    >>> plan = plan_units(["mg/L", "ug/L", "mg/L", "uS/cm"])
    >>> plan.target, plan.factor_of("ug/L"), plan.target_of("uS/cm"), plan.apart
    ('mg/L', 0.001, 'µS/cm', ('uS/cm',))
    """
    counts = Counter(units)
    canonical, unit_of, readable = _row_units(counts)
    rows, unitless = _row_counts(counts, unit_of)
    only = next(iter(rows)) if len(rows) == 1 else None
    if only is not None:  # rows with no unit are in the analyte's only unit
        rows[only] += unitless
        unit_of = {s: only if unit is None else unit for s, unit in unit_of.items()}
    reported, targets, factors = _reported(rows, readable, unit_of)
    if unitless and only is None:
        reported.append(None)
    main = reported[0] if reported else None
    return UnitPlan(
        target=main,
        canonical=canonical,
        targets=targets,
        factors=factors,
        apart=tuple(spelling for spelling in counts if targets[spelling] != main),
        groups=tuple(reported),
        assumed=unitless if only is not None else 0,
        unreadable=tuple(unit for unit in rows if unit not in readable),
        spelled=_spelled(counts, unit_of),
    )

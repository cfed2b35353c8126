"""Physical quantities written as text: "915 MHz", "2.2nH", "1.5p", "50 ohm".

Parsing is done by the quantiphy library (SI scale factors, exponents, units);
this module adds only what SPICE users write and SI does not: the ``meg``
suffix (mega) and ``ohm``/``Ω`` spellings, and checks the unit against the
one the key expects.

Rules
-----
* SI prefixes are case-sensitive, as in SI: ``M`` is mega, ``m`` is milli.
  SPICE's ``meg`` (any case) is accepted for mega.
* A value with a unit must carry the expected unit (``"24 V"`` for a voltage).
* A value with a scale suffix but no unit is accepted SPICE-style (``"1.5p"``
  for a capacitance).
* A bare number (``"24"``) where a unit is expected is an error: units are
  never guessed.
* NaN and infinities are errors.
"""

from __future__ import annotations

import math
import re

from quantiphy import QuantiPhyError, Quantity

from netgen.errors import DesignError

__all__ = ["parse_quantity", "format_quantity", "UNIT_ALIASES"]

# Spellings accepted for a unit, mapped to the canonical symbol used in messages.
UNIT_ALIASES: dict[str, tuple[str, ...]] = {
    "Hz": ("Hz", "hz", "HZ"),
    "V": ("V", "v"),
    "A": ("A", "a"),
    "W": ("W", "w"),
    "ohm": ("ohm", "ohms", "Ohm", "Ohms", "OHM", "Ω", "Ω"),
    "H": ("H", "h"),
    "F": ("F", "f"),
    "s": ("s", "sec"),
    "m": ("m", "meter", "metre"),
    "dB": ("dB", "db"),
    "deg": ("deg", "°"),
    "dBm": ("dBm", "dbm", "DBM"),
}

_MEG = re.compile(r"(?<=[0-9.\s])meg", re.IGNORECASE)
_SCALE = set("YZEPTGMkmunpfazy") | {"µ", "μ"}
_BARE_NUMBER = re.compile(r"^[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?$")
#: a number literal, one blank, a unit spelling (no scale prefix)
_PLAIN = re.compile(r"^([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?) (\S+)$")


def _canonical_unit(units: str) -> str | None:
    for canon, spellings in UNIT_ALIASES.items():
        if units in spellings:
            return canon
    return None


def parse_quantity(value: object, unit: str, key: str) -> float:
    """Parse ``value`` as a quantity in ``unit`` and return it as an SI float.

    Parameters
    ----------
    value : str, int or float
        The text from the design file ("915 MHz", "2.2nH", "1.5p"). A number is
        accepted only for dimensionless quantities (``unit == ""``).
    unit : str
        The canonical unit the key expects ("Hz", "V", "ohm", "H", "F", ...),
        or "" for a dimensionless number.
    key : str
        The dotted key path, used in error messages (``design.f0``).

    Returns
    -------
    float
        The value in SI base units (Hz, V, ohm, H, F, ...).

    Raises
    ------
    DesignError
        With one sentence naming ``key``, what was given and what to write.
    """
    example = {"Hz": "915 MHz", "V": "24 V", "A": "1.2 A", "W": "8 W", "ohm": "50 ohm",
               "H": "2.2 nH", "F": "1.5 pF", "s": "10 ns", "m": "25 mm", "dB": "0.2 dB",
               "deg": "180 deg", "dBm": "20 dBm"}.get(unit, "")
    if isinstance(value, bool):
        raise DesignError(f"{key}: expected a quantity in {unit or 'plain numbers'}, got {str(value).lower()} (TOML true/false).")
    if isinstance(value, (int, float)):
        number = float(value)
        if unit:
            raise DesignError(
                f"{key}: {value!r} has no unit; write it with its unit, e.g. \"{example}\"."
            )
        _check_finite(number, value, key)
        return number
    if not isinstance(value, str):
        raise DesignError(f"{key}: expected text such as \"{example or '1.0'}\", got {type(value).__name__}.")
    text = value.strip()
    if not text:
        raise DesignError(f"{key}: the value is empty; write e.g. \"{example or '1.0'}\".")
    if "\n" in text or "\r" in text:
        raise DesignError(f"{key}: a quantity must be on one line.")
    plain = _PLAIN.match(text)
    if plain and unit and plain.group(2) in UNIT_ALIASES.get(unit, ()) and plain.group(2) not in _SCALE:
        # "5.963e-07 H": a number literal and the key's own unit, as pashape writes values itself
        # (sweep points, sized files); the same float quantiphy reads, without its parser (a
        # spelling that is also a scale letter, "1 a", "5 m", is left to quantiphy: it reads atto, milli)
        number = float(plain.group(1))
        _check_finite(number, value, key)  # "1e400 V" is a literal too
        return number
    spice = _MEG.sub("M", text)
    try:
        q = Quantity(spice)
    except (QuantiPhyError, ValueError, TypeError):
        raise DesignError(
            f"{key}: cannot read {value!r} as a quantity; write e.g. \"{example or '1.0'}\"."
        ) from None
    number = float(q.real)
    _check_finite(number, value, key)
    units = (q.units or "").strip()
    if not unit:
        if units:
            raise DesignError(f"{key}: expected a plain number, got {value!r} with unit {units!r}.")
        return number
    if units:
        canon = _canonical_unit(units)
        if unit == "dBm" and canon == "W":
            return _watts_to_dbm(number, value, key)
        if canon != unit:
            raise DesignError(
                f"{key}: {value!r} is in {units!r} but this key takes {unit}; write e.g. \"{example}\"."
            )
        return number
    # no unit: accept only with an explicit scale suffix (SPICE style "1.5p")
    if _BARE_NUMBER.match(text.replace(" ", "")):
        raise DesignError(
            f"{key}: {value!r} has no unit; write it with its unit, e.g. \"{example}\"."
        )
    return number


def _watts_to_dbm(number: float, value: object, key: str) -> float:
    """A power in W as dBm: 10 log10(P / 1 mW) (the definition of the dBm)."""
    if number <= 0:
        raise DesignError(f"{key}: {value!r} is not a positive power; give it in W above 0 or in dBm.")
    return 10.0 * math.log10(number / 1e-3)


def _check_finite(number: float, value: object, key: str) -> None:
    if not math.isfinite(number):
        raise DesignError(f"{key}: {value!r} is not a finite number; give a finite value.")


def format_quantity(value_si: float, unit: str, digits: int = 4) -> str:
    """Format an SI float for display and for sized design files ("2.533 nH").

    The text round-trips through :func:`parse_quantity` to within ``digits``
    significant figures.
    """
    if value_si == 0:
        return f"0 {unit}".strip()
    return Quantity(value_si, unit).render(prec=digits - 1, strip_zeros=True)

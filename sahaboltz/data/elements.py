"""Element symbols and the two species notations: spectroscopic ("Fe II") and charge ("Fe2+")."""

from __future__ import annotations

import re

from sahaboltz.errors import InputError, UnknownSpeciesError

#: element symbols by atomic number (index 0 unused)
SYMBOLS = ("", *"""
H He Li Be B C N O F Ne Na Mg Al Si P S Cl Ar K Ca Sc Ti V Cr Mn Fe Co Ni Cu Zn Ga Ge As Se Br Kr
Rb Sr Y Zr Nb Mo Tc Ru Rh Pd Ag Cd In Sn Sb Te I Xe Cs Ba La Ce Pr Nd Pm Sm Eu Gd Tb Dy Ho Er Tm
Yb Lu Hf Ta W Re Os Ir Pt Au Hg Tl Pb Bi Po At Rn Fr Ra Ac Th Pa U Np Pu Am Cm Bk Cf Es Fm""".split())

Z_OF = {s: z for z, s in enumerate(SYMBOLS) if s}
_Z_OF_LOWER = {s.lower(): z for s, z in Z_OF.items()}

_ROMAN = (("M", 1000), ("CM", 900), ("D", 500), ("CD", 400), ("C", 100), ("XC", 90), ("L", 50),
          ("XL", 40), ("X", 10), ("IX", 9), ("V", 5), ("IV", 4), ("I", 1))


def roman(n: int) -> str:
    """Roman numeral of a positive integer (stage number: I = neutral)."""
    if n < 1:
        raise InputError(f"stage number must be >= 1, got {n}")
    out = []
    for sym, val in _ROMAN:
        while n >= val:
            out.append(sym)
            n -= val
    return "".join(out)


def from_roman(text: str) -> int:
    """Integer value of a Roman numeral (``"XXVI"`` -> 26)."""
    text = text.upper()
    if not text or not re.fullmatch(r"[IVXLCDM]+", text):
        raise InputError(f"not a Roman numeral: {text!r}")
    vals = {"I": 1, "V": 5, "X": 10, "L": 50, "C": 100, "D": 500, "M": 1000}
    total = 0
    for a, b in zip(text, text[1:] + " "):
        v = vals[a]
        total += -v if b != " " and vals[b] > v else v
    if roman(total) != text:
        raise InputError(f"not a canonical Roman numeral: {text!r}")
    return total


def atomic_number(symbol: str | int) -> int:
    """Atomic number of an element symbol (case-insensitive) or pass an integer through."""
    if isinstance(symbol, (int,)) and not isinstance(symbol, bool):
        if 1 <= symbol < len(SYMBOLS):
            return int(symbol)
        raise UnknownSpeciesError(f"no element with atomic number {symbol}")
    z = Z_OF.get(str(symbol).strip()) or _Z_OF_LOWER.get(str(symbol).strip().lower())
    if z is None:
        raise UnknownSpeciesError(f"unknown element {symbol!r}: use a symbol such as 'Fe' or 'He'")
    return z


_SPECTRO = re.compile(r"^\s*([A-Za-z]{1,2})\s*[_ ]?\s*([IVXLCDMivxlcdm]+)\s*$")


def parse_species(text: str) -> tuple[int, int]:
    """Parse a species name into (Z, charge).

    Accepts spectroscopic notation (``"Fe II"``, ``"FeII"``, ``"fe_ii"``) and charge notation
    (``"Fe"``, ``"Fe+"``, ``"Fe2+"``, ``"Fe+2"``, ``"Fe++"``). Negative ions such as ``"H-"``
    give charge -1.

    Raises
    ------
    UnknownSpeciesError
        For an unknown element or a stage beyond the bare nucleus.
    """
    if not isinstance(text, str):
        raise InputError(f"species must be a string such as 'Fe II' or 'Fe+', got {text!r}")
    s = text.strip()
    m = _SPECTRO.match(s)
    if m and (m.group(1).capitalize() in Z_OF or m.group(1) in Z_OF):
        sym = m.group(1)
        # "Ni" is nickel, not N + roman I; only split when the remainder is a numeral after a
        # known symbol and the whole string is not itself a symbol
        if s.replace(" ", "") not in Z_OF or " " in s or "_" in s:
            z = atomic_number(sym)
            charge = from_roman(m.group(2)) - 1
            return _checked(z, charge, text)
    if m and " " in s:
        atomic_number(m.group(1))  # "Xx II": report the unknown element
    m = re.fullmatch(r"([A-Za-z]{1,2})\s*(\+{2,}|-{2,})", s)
    if m:  # "Fe++"
        sign = 1 if m.group(2)[0] == "+" else -1
        return _checked(atomic_number(m.group(1)), sign * len(m.group(2)), text)
    m = re.fullmatch(r"([A-Za-z]{1,2})\s*(\d*)\s*([+-]?)\s*(\d*)", s)
    if m:
        sym, n1, sign, n2 = m.groups()
        z = atomic_number(sym)
        if n1 and n2:
            raise UnknownSpeciesError(f"cannot read the charge in {text!r}")
        elif sign:
            num = int(n1 or n2 or 1)
            charge = num if sign == "+" else -num
        elif n1 or n2:
            raise UnknownSpeciesError(f"cannot read the charge in {text!r}: write 'Fe2+' or 'Fe III'")
        else:
            charge = 0
        return _checked(z, charge, text)
    raise UnknownSpeciesError(
        f"cannot read species {text!r}: use spectroscopic ('Fe II') or charge ('Fe+') notation")


def _checked(z: int, charge: int, text: str) -> tuple[int, int]:
    if charge > z:
        raise UnknownSpeciesError(
            f"{text!r}: {SYMBOLS[z]} has only {z} electrons, so the highest stage is "
            f"{SYMBOLS[z]} {roman(z + 1)} (the bare nucleus)")
    if charge < -1:
        raise UnknownSpeciesError(f"{text!r}: only singly charged negative ions are supported")
    return z, charge


def spectroscopic_name(z: int, charge: int) -> str:
    """``(26, 1)`` -> ``"Fe II"``."""
    if charge < 0:
        return f"{SYMBOLS[z]}{'-' * -charge}"
    return f"{SYMBOLS[z]} {roman(charge + 1)}"

"""Writes a CIF 1.1 file from an asymmetric unit, a Hall number and a comment block.

Shared by structures/reference/make_reference.py and structures/demo/make_demo.py. The symmetry
operator loop comes from spglib's space-group database for the given Hall number, so the listed
operators (centring translations included) are exactly those of the setting named in the file.
Needs spglib and numpy (both on PyPI).
"""

from __future__ import annotations

import math
import re
from fractions import Fraction

import numpy as np
import spglib


def _frac_str(t: float) -> str:
    """A translation component as a short fraction ('1/2', '3/4', ...), '' for zero."""
    f = Fraction(t).limit_denominator(24) % 1
    if f == 0:
        return ""
    return f"{f.numerator}/{f.denominator}"


def symop_xyz(rot: np.ndarray, trans: np.ndarray) -> str:
    """One operator in the 'x,y,z' notation of _space_group_symop_operation_xyz."""
    parts = []
    for i in range(3):
        s = ""
        for j, name in enumerate("xyz"):
            c = int(round(rot[i, j]))
            if c == 1:
                s += ("+" if s else "") + name
            elif c == -1:
                s += "-" + name
            elif c != 0:
                raise ValueError(f"unexpected rotation element {c}")
        t = _frac_str(float(trans[i]))
        if t:
            s += "+" + t
        parts.append(s)
    return ",".join(parts)


def symops_for_hall(hall: int) -> list[str]:
    sym = spglib.get_symmetry_from_database(hall)
    ops = [symop_xyz(r, t) for r, t in zip(sym["rotations"], sym["translations"])]
    # identity first, as CIF readers and people expect
    ops.sort(key=lambda o: (o != "x,y,z",))
    return ops


def _wrap(v: float) -> float:
    v = v % 1.0
    return 0.0 if abs(v - 1.0) < 1e-9 else v


def multiplicity(hall: int, xyz: tuple[float, float, float]) -> int:
    """Number of distinct images of a site in the conventional cell."""
    sym = spglib.get_symmetry_from_database(hall)
    p = np.array(xyz, float)
    images: list[np.ndarray] = []
    for r, t in zip(sym["rotations"], sym["translations"]):
        q = np.array([_wrap(v) for v in r @ p + t])
        if not any(np.allclose(np.abs(((q - o) + 0.5) % 1.0 - 0.5), 0, atol=1e-4) for o in images):
            images.append(q)
    return len(images)


def fmt_num(v: float) -> str:
    """Coordinates and occupancies: exact for simple fractions, otherwise 6 decimals at most."""
    for den in (2, 3, 4, 6, 8, 12, 24):
        n = round(v * den)
        if abs(v * den - n) < 1e-9:
            return f"{n / den:.6f}".rstrip("0").rstrip(".") if den in (2, 4, 8) else f"{n / den:.6f}"
    s = f"{v:.6f}".rstrip("0")
    return s + "0" if s.endswith(".") else s


def cell_volume(a, b, c, al, be, ga) -> float:
    ca, cb, cg = (math.cos(math.radians(x)) for x in (al, be, ga))
    return a * b * c * math.sqrt(1 - ca * ca - cb * cb - cg * cg + 2 * ca * cb * cg)


def element_of(type_symbol: str) -> str:
    m = re.match(r"[A-Z][a-z]?", type_symbol)
    assert m, type_symbol
    return m.group(0)


def oxidation_of(type_symbol: str) -> float:
    m = re.match(r"[A-Z][a-z]?(\d+(?:\.\d+)?)?([+-])$", type_symbol)
    assert m, f"type symbol without charge: {type_symbol}"
    mag = float(m.group(1)) if m.group(1) else 1.0
    return mag if m.group(2) == "+" else -mag


def write_cif(
    path: str,
    *,
    block: str,
    comment: str,
    cell: tuple[float, float, float, float, float, float],
    hm: str,
    number: int,
    hall: int,
    hall_symbol: str,
    z: int,
    sites: list[tuple],
    name: str = "",
) -> None:
    """sites: (label, type_symbol, x, y, z, occupancy). Writes to a temp file and renames."""
    import os

    sgt = spglib.get_spacegroup_type(hall)
    if sgt.number != number or sgt.hall_symbol != hall_symbol:
        raise ValueError(
            f"{path}: Hall number {hall} is {sgt.hall_symbol} (No. {sgt.number}), "
            f"not {hall_symbol} (No. {number})"
        )
    ops = symops_for_hall(hall)
    a, b, c, al, be, ga = cell
    vol = cell_volume(*cell)
    types: dict[str, float] = {}
    counts: dict[str, float] = {}
    for label, ts, x, y, zz, occ in sites:
        types.setdefault(ts, oxidation_of(ts))
        el = element_of(ts)
        counts[el] = counts.get(el, 0.0) + occ * multiplicity(hall, (x, y, zz)) / z
    formula = " ".join(
        f"{el}{fmt_num(n) if abs(n - 1) > 1e-9 else ''}" for el, n in sorted(counts.items())
    )
    lines = ["#\\#CIF_1.1", "#"]
    lines += ["# " + ln if ln else "#" for ln in comment.strip("\n").split("\n")]
    lines += ["#", f"data_{block}"]
    if name:
        lines.append(f"_chemical_name_common            '{name}'")
    lines += [
        f"_chemical_formula_sum            '{formula}'",
        f"_cell_length_a                   {a}",
        f"_cell_length_b                   {b}",
        f"_cell_length_c                   {c}",
        f"_cell_angle_alpha                {al}",
        f"_cell_angle_beta                 {be}",
        f"_cell_angle_gamma                {ga}",
        f"_cell_volume                     {vol:.3f}",
        f"_cell_formula_units_Z            {z}",
        f"_symmetry_space_group_name_H-M   '{hm}'",
        f"_space_group_name_Hall           '{hall_symbol}'",
        f"_space_group_IT_number           {number}",
        "",
        "loop_",
        "_space_group_symop_id",
        "_space_group_symop_operation_xyz",
    ]
    lines += [f"{i + 1} '{op}'" for i, op in enumerate(ops)]
    lines += ["", "loop_", "_atom_type_symbol", "_atom_type_oxidation_number"]
    lines += [f"{ts} {fmt_num(ox)}" for ts, ox in types.items()]
    lines += [
        "",
        "loop_",
        "_atom_site_label",
        "_atom_site_type_symbol",
        "_atom_site_symmetry_multiplicity",
        "_atom_site_fract_x",
        "_atom_site_fract_y",
        "_atom_site_fract_z",
        "_atom_site_occupancy",
    ]
    for label, ts, x, y, zz, occ in sites:
        m = multiplicity(hall, (x, y, zz))
        lines.append(
            f"{label} {ts} {m} {fmt_num(x)} {fmt_num(y)} {fmt_num(zz)} {fmt_num(occ)}"
        )
    lines.append("")
    tmp = path + ".tmp"
    with open(tmp, "w") as fh:
        fh.write("\n".join(lines))
    os.replace(tmp, path)

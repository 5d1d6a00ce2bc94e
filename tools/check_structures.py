#!/usr/bin/env python3
"""Cross-checks every CIF under structures/ (recursively) with independent libraries.

For each file:
  - syntax: gemmi.cif.read_file (gemmi, PyPI) must read it;
  - structure: pymatgen CifParser(primitive=False) (pymatgen, PyPI) expands the sites;
  - symmetry: spglib (PyPI) finds the space group of the expanded cell (symprec 1e-3 A) and it must
    equal _space_group_IT_number stated in the file;
  - charge: sum over all sites of occupancy x oxidation state must vanish (|q| <= 1e-3 e per cell);
  - distances: the shortest distance between fully occupied sites must be >= 1.2 A (shorter
    contacts involving partially occupied sites are reported only: split or alternative sites);
  - bond valence: per crystallographic site, the bond-valence sum s = exp((R0 - R)/b) over the
    counter-ions (cation-anion contacts, R < R0 + 2 A, each weighted by the neighbour's occupancy;
    a mixed site is the occupancy-weighted mean of its species) with valence-specific parameters
    of Brown & Altermatt, Acta Cryst. B41 (1985) 244 (ref a) or Brese & O'Keeffe, Acta Cryst. B47
    (1991) 192 (ref b), as listed in the IUCr table bvparm2013.cif (BV_PARAMS below; checked
    against the table itself when it is found, see --bvparm). Fully occupied sites (mixed ones
    included) fail beyond 0.35 v.u. from the formal valence; partly occupied sites are reported
    only.
    For comparison the sum from pymatgen.analysis.bond_valence.calculate_bv_sum_unordered
    (pymatgen's own parameters: element constants of O'Keeffe & Brese, J. Am. Chem. Soc. 113 (1991)
    3226, with b = 0.31 A, neighbours within 4 A) is printed beside it. It ignores the oxidation
    state, so it is biased for high-valent cations (about -0.4 v.u. for Mn(3.5+) in LiMn2O4 and
    Mn4+ in MnO2 at textbook Mn-O lengths); it is a pass/fail criterion only with
    --strict-pymatgen.

Prints one table row per file (formula, Z, volume, space groups, charge, shortest distance,
worst BVS deviation) and the failures; exits 1 if any file fails.

Usage: python tools/check_structures.py [ROOT ...]   (default: structures/ next to tools/)
"""

from __future__ import annotations

import argparse
import math
import sys
import warnings
from pathlib import Path

import gemmi
import numpy as np
import spglib
from pymatgen.analysis.bond_valence import calculate_bv_sum_unordered
from pymatgen.io.cif import CifParser

SYMPREC = 1e-3  # A
CHARGE_TOL = 1e-3  # e per cell
MIN_DIST = 1.2  # A
BVS_TOL = 0.35  # v.u.
PMG_RADIUS = 4.0  # A, neighbour cutoff for pymatgen's sums (as its BVAnalyzer)
BV_REACH = 2.0  # A beyond R0: contacts longer than R0 + 2 A contribute < 0.005 v.u. (b = 0.37)
FULL = 1.0 - 1e-6

# (cation, valence, anion, valence) -> (R0 / A, b / A, ref id in bvparm2013.cif).
# Rows copied from the IUCr accumulated table of bond-valence parameters (bvparm2013.cif,
# compiled by I. D. Brown), whose rows for a pair are "listed in decreasing order of
# reliability": for each pair the first row, skipping sets fitted with a long cut-off (ref c,
# "6 A cut-off"), so that all rows are first-coordination-shell parameters. Refs: a = Brown &
# Altermatt 1985, b = Brese & O'Keeffe 1991, i = Wood & Palenik 1998,
# bj = Krivovichev 2012, e = I. D. Brown, private communication, aj as listed in the table.
# Rows whose table valence is 9 ("unspecified", Ag-Br and Ag-I) are used for Ag+, and for
# P5+-Se and Sb5+-S, which the table has only with an unspecified valence.
BV_PARAMS: dict[tuple[str, int, str, int], tuple[float, float, str]] = {
    ("Li", 1, "O", -2): (1.466, 0.37, "a"),
    ("Li", 1, "S", -2): (1.94, 0.37, "b"),
    ("Li", 1, "Cl", -1): (1.91, 0.37, "b"),
    ("Li", 1, "N", -3): (1.61, 0.37, "b"),
    ("Li", 1, "F", -1): (1.360, 0.37, "a"),
    ("Na", 1, "O", -2): (1.803, 0.37, "a"),
    ("Na", 1, "S", -2): (2.300, 0.37, "a"),
    ("K", 1, "O", -2): (2.132, 0.37, "a"),
    ("Ba", 2, "O", -2): (2.285, 0.37, "a"),
    ("La", 3, "O", -2): (2.086, 0.45, "bj"),
    ("Fe", 2, "O", -2): (1.734, 0.37, "a"),
    ("Fe", 3, "O", -2): (1.759, 0.37, "a"),
    ("Co", 3, "O", -2): (1.637, 0.37, "i"),
    ("Co", 4, "O", -2): (1.72, 0.37, "e"),
    ("Mn", 3, "O", -2): (1.760, 0.37, "a"),
    ("Mn", 4, "O", -2): (1.753, 0.37, "a"),
    ("Ti", 3, "O", -2): (1.791, 0.37, "b"),
    ("Ti", 4, "O", -2): (1.815, 0.37, "a"),
    ("Ti", 4, "F", -1): (1.76, 0.37, "b"),
    ("Zr", 4, "O", -2): (1.928, 0.37, "a"),
    ("Sn", 4, "O", -2): (1.905, 0.37, "a"),
    ("Nb", 5, "O", -2): (1.911, 0.37, "a"),
    ("Nb", 5, "F", -1): (1.87, 0.37, "b"),
    ("Mo", 6, "O", -2): (1.907, 0.37, "a"),
    ("W", 6, "O", -2): (1.917, 0.37, "a"),
    ("W", 5, "O", -2): (1.881, 0.37, "aj"),
    ("P", 5, "O", -2): (1.617, 0.37, "a"),
    ("P", 5, "S", -2): (2.145, 0.37, "a"),
    ("Si", 4, "O", -2): (1.624, 0.37, "b"),
    ("Al", 3, "O", -2): (1.620, 0.37, "e"),
    ("Na", 1, "Cl", -1): (2.15, 0.37, "b"),
    ("K", 1, "Cl", -1): (2.519, 0.37, "a"),
    ("K", 1, "S", -2): (2.59, 0.37, "b"),
    ("Ag", 1, "Cl", -1): (2.09, 0.37, "b"),
    ("Ag", 1, "Br", -1): (2.22, 0.37, "b"),  # table row has valence 9 (unspecified)
    ("Ag", 1, "I", -1): (2.38, 0.37, "b"),  # table row has valence 9 (unspecified)
    ("Mg", 2, "O", -2): (1.693, 0.37, "a"),
    ("Cu", 1, "O", -2): (1.610, 0.37, "e"),
    ("V", 3, "O", -2): (1.743, 0.37, "a"),
    ("V", 4, "O", -2): (1.784, 0.37, "a"),
    ("Ge", 4, "S", -2): (2.217, 0.37, "a"),
    ("Y", 3, "S", -2): (2.48, 0.37, "b"),
    ("Ti", 4, "S", -2): (2.29, 0.37, "e"),
    ("Li", 1, "Br", -1): (2.02, 0.37, "b"),
    ("Li", 1, "I", -1): (2.22, 0.37, "b"),
    ("K", 1, "Br", -1): (2.66, 0.37, "b"),
    ("Ag", 1, "O", -2): (1.842, 0.37, "a"),
    ("Mn", 2, "O", -2): (1.790, 0.37, "a"),
    ("Co", 2, "O", -2): (1.692, 0.37, "a"),
    ("Ni", 2, "O", -2): (1.675, 0.37, "e"),
    ("Mg", 2, "Se", -2): (2.32, 0.37, "b"),
    ("Sc", 3, "Se", -2): (2.44, 0.37, "b"),
    ("Na", 1, "Se", -2): (2.41, 0.37, "b"),
    ("P", 5, "Se", -2): (2.26, 0.37, "b"),  # table row has valence 9 (unspecified)
    ("Sb", 5, "S", -2): (2.45, 0.37, "b"),  # table row has valence 9 (unspecified)
}


# Fully occupied sites whose bond-valence sum is known to miss the formal valence by more than
# BVS_TOL for a physical reason or a weakness of the parameter, not because the file is wrong:
# (file name, site label) -> (largest accepted |deviation| / v.u., reason). Printed as notes.
BVS_EXCEPTIONS: dict[tuple[str, str], tuple[float, str]] = {
    ("Li3N_alpha.cif", "N1"): (
        0.65,
        "N in alpha-Li3N sums to 2.40 v.u. with the only Li-N parameter of the table (R0 1.61 A, "
        "Brese & O'Keeffe 1991); every Li-N length is fixed by the cell (common practice: the "
        "known underbonding of N in Li3N)",
    ),
    ("Li3OCl_antiperovskite.cif", "O1"): (
        0.45,
        "O in the cubic antiperovskite Li3OCl sums to 1.61 v.u.; Li-O = a/2 is fixed by the cell "
        "(the metastable antiperovskite's underbonded O: common practice)",
    ),
    ("NaAl11O17_beta_alumina.cif", "Na1"): (
        0.6,
        "Na on the Beevers-Ross site of beta-alumina is underbonded (about 0.5 v.u.): the "
        "oversized site is why Na is mobile (common practice)",
    ),
    ("NaFePO4_olivine_mp.cif", "Na1"): (
        0.45,
        "Na on the small M1 octahedron of (metastable) olivine NaFePO4 sums to 1.41 v.u. in this "
        "DFT-relaxed entry: Na is squeezed into the Li site of the olivine frame",
    ),
    ("Li10GeP2S12_ordered_dft.cif", "S4"): (
        0.45,
        "DFT (GGA) structure: bonds about 1-2 % long, and S4 has long Li-S contacts in this "
        "ordered Li arrangement; sums to 1.62 v.u.",
    ),
    ("TiNb2O7_block_relaxed.cif", "Nb6"): (
        0.55,
        "relaxed with a universal machine-learned potential trained on GGA data (bonds 1-2 % long, "
        "which lowers a Nb5+ sum by about 0.3-0.4 v.u.) in one ordered Ti/Nb arrangement: Nb6 "
        "sums to 4.49 v.u.; a stand-in structure, not a refinement (see the file's header)",
    ),
    ("TiNb2O7_block_relaxed.cif", "Nb7"): (
        0.55,
        "as Nb6: the GGA-trained relaxation leaves Nb7 at 4.58 v.u.",
    ),
    ("Li3V2PO43_nasicon_mp.cif", "Li2"): (
        0.45,
        "DFT (GGA) structure with an ordered Li arrangement on the NASICON frame: Li2 and Li4 in "
        "large, low-coordinated sites sum to about 0.63 v.u.",
    ),
    ("Li3V2PO43_nasicon_mp.cif", "Li4"): (
        0.45,
        "as Li2: low-coordinated Li in the ordered DFT arrangement, about 0.64 v.u.",
    ),
    ("NaAl11O17_beta_alumina.cif", "Al2"): (
        0.45,
        "tetrahedral Al2 sums to about 2.6 v.u. with R0(Al-O) = 1.620 A (ref e); tetrahedral "
        "Al-O bonds near 1.80 A come out low with this parameter",
    ),
    ("KAl11O17_beta_alumina.cif", "Al2"): (
        0.45,
        "the framework of NaAl11O17_beta_alumina.cif (ion-exchange model): tetrahedral Al2 as "
        "there, about 2.6 v.u.",
    ),
    ("AgAl11O17_beta_alumina.cif", "Al2"): (
        0.45,
        "the framework of NaAl11O17_beta_alumina.cif (ion-exchange model): tetrahedral Al2 as "
        "there, about 2.6 v.u.",
    ),
    ("AgAl11O17_beta_alumina.cif", "Ag1"): (
        0.6,
        "Ag on the oversized Beevers-Ross site of the Na framework sums to about 0.5 v.u., as Na "
        "does there (ion-exchange model; the site's looseness is why the ion is mobile)",
    ),
    ("Li3OBr_antiperovskite.cif", "O1"): (
        0.65,
        "O in the cubic antiperovskite Li3OBr sums to about 1.38 v.u.; Li-O = a/2 is fixed by "
        "the cell and stretched further by the larger Br than in Li3OCl (common practice: the "
        "underbonded O of these metastable antiperovskites)",
    ),
    ("Na3SbS4_cubic.cif", "Sb1"): (
        0.65,
        "Sb5+ sums to about 5.6 v.u. at Sb-S = 2.33 A with the only Sb-S parameter of the table "
        "that does not assume Sb3+ (Sb of unspecified valence, R0 = 2.45 A, ref b); the bond "
        "length, not the parameter, is the remembered fact",
    ),
}


def verify_bv_params(path: Path) -> list[str]:
    """Compares BV_PARAMS with the rows of bvparm2013.cif; returns the disagreements."""
    doc = gemmi.cif.read_file(str(path))
    table = doc.sole_block().find(
        "_valence_param_",
        ["atom_1", "atom_1_valence", "atom_2", "atom_2_valence", "Ro", "B", "ref_id"],
    )
    rows: dict[tuple[str, int, str, int], list[tuple[float, float, str]]] = {}
    for r in table:
        try:
            key = (r[0], int(r[1]), r[2], int(r[3]))
            rows.setdefault(key, []).append((float(r[4]), float(r[5]), r[6]))
        except ValueError:
            continue
    bad = []
    for key, (r0, b, ref) in BV_PARAMS.items():
        # valence 9 in the table means "any valence" (e.g. Ag-Br, Ag-I)
        cands = rows.get(key, []) + rows.get((key[0], 9, key[2], key[3]), [])
        if not any(abs(x - r0) < 1e-6 and abs(y - b) < 1e-6 and z == ref for x, y, z in cands):
            bad.append(f"{key}: embedded ({r0}, {b}, {ref}) not found in {path}")
    return bad


def stated_space_group(path: Path) -> tuple[int | None, str]:
    doc = gemmi.cif.read_file(str(path))
    block = doc.sole_block()
    num = block.find_value("_space_group_IT_number") or block.find_value(
        "_symmetry_Int_Tables_number"
    )
    hm = block.find_value("_symmetry_space_group_name_H-M") or block.find_value(
        "_space_group_name_H-M_alt"
    )
    return (int(num) if num else None), (gemmi.cif.as_string(hm) if hm else "")


def stated_z(path: Path) -> int:
    """_cell_formula_units_Z of the file (1 when absent)."""
    v = gemmi.cif.read_file(str(path)).sole_block().find_value("_cell_formula_units_Z")
    return int(v) if v and v not in "?." else 1


def _num(n: float) -> str:
    """A formula count: blank for 1, integer when whole, else up to 3 decimals."""
    if abs(n - 1) < 5e-4:
        return ""
    if abs(n - round(n)) < 5e-4:
        return str(int(round(n)))
    return f"{n:.3f}".rstrip("0")


def spglib_number(struct) -> tuple[int, str]:
    """Space group of the expanded cell; each distinct site composition is its own atom type."""
    kinds: dict[str, int] = {}
    numbers = []
    for site in struct:
        key = ",".join(
            f"{sp}:{occ:.4f}" for sp, occ in sorted(site.species.items(), key=lambda kv: str(kv[0]))
        )
        numbers.append(kinds.setdefault(key, len(kinds) + 1))
    cell = (struct.lattice.matrix, struct.frac_coords, numbers)
    ds = spglib.get_symmetry_dataset(cell, symprec=SYMPREC)
    return ds.number, ds.international


def _ox(sp) -> float:
    return float(getattr(sp, "oxi_state", None) or 0.0)


def site_formal(site) -> tuple[float, float]:
    """(total occupancy, occupancy-weighted mean oxidation state) of a site."""
    occ = sum(site.species.values())
    return occ, sum(_ox(sp) * o for sp, o in site.species.items()) / occ


def bv_param(sp_a, sp_b) -> tuple[float, float] | None:
    """(R0, b) for a cation-anion pair in either order; None if the pair is not a bond."""
    qa, qb = _ox(sp_a), _ox(sp_b)
    if qa * qb >= 0:
        return None
    cat, an = (sp_a, sp_b) if qa > 0 else (sp_b, sp_a)
    key = (cat.symbol, int(round(_ox(cat))), an.symbol, int(round(_ox(an))))
    if key not in BV_PARAMS or abs(_ox(cat) - key[1]) > 1e-9 or abs(_ox(an) - key[3]) > 1e-9:
        raise KeyError(f"no bond-valence parameter for {cat}-{an} in BV_PARAMS")
    r0, b, _ = BV_PARAMS[key]
    return r0, b


def bvs_site(struct, site) -> float:
    """Signed bond-valence sum per ion on the site (occupancy weighted, mixed sites averaged)."""
    reach = max(r0 for r0, _, _ in BV_PARAMS.values()) + BV_REACH
    nn = struct.get_neighbors(site, reach)
    occ = sum(site.species.values())
    total = 0.0
    for sp, o in site.species.items():
        v = 0.0
        for n in nn:
            for sp2, o2 in n.species.items():
                p = bv_param(sp, sp2)
                if p is None:
                    continue
                r0, b = p
                if n.nn_distance <= r0 + BV_REACH:
                    v += o2 * math.exp((r0 - n.nn_distance) / b)
        total += o * v * (1.0 if _ox(sp) > 0 else -1.0)
    return total / occ


def check_file(path: Path, strict_pymatgen: bool) -> tuple[dict, list[str]]:
    fails: list[str] = []
    row: dict = {"file": str(path)}
    try:
        gemmi.cif.read_file(str(path))
    except Exception as e:
        raise RuntimeError(f"CIF syntax (gemmi): {e}") from e
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            structs = CifParser(str(path)).parse_structures(primitive=False)
    except Exception as e:
        raise RuntimeError(f"structure (pymatgen CifParser): {type(e).__name__}: {e}") from e
    if len(structs) != 1:
        fails.append(f"{len(structs)} structures parsed, expected 1")
    s = structs[0]
    z = stated_z(path)
    per_z = {el.symbol: n / z for el, n in s.composition.element_composition.items()}
    formula = "".join(f"{el}{_num(n)}" for el, n in sorted(per_z.items()))
    row.update(formula=formula, Z=z, V=s.volume)

    num, hm = stated_space_group(path)
    found, found_sym = spglib_number(s)
    row.update(sg_stated=f"{hm} ({num})", sg_found=f"{found_sym} ({found})")
    if num != found:
        fails.append(f"space group: file states {num}, spglib finds {found} ({found_sym})")

    # charge neutrality from the oxidation states
    charge = 0.0
    for site in s:
        for sp, occ in site.species.items():
            if getattr(sp, "oxi_state", None) is None:
                fails.append(f"no oxidation state for {sp}")
            charge += _ox(sp) * occ
    row["charge"] = charge
    if abs(charge) > CHARGE_TOL:
        fails.append(f"cell charge {charge:+.4f} e (tolerance {CHARGE_TOL})")

    # shortest distances
    dmin_all, dmin_full = math.inf, math.inf
    pair_full = ""
    full = [sum(site.species.values()) >= FULL for site in s]
    centers, points, _, dists = s.get_neighbor_list(r=3.0)
    for i, j, d in zip(centers, points, dists):
        if d < 1e-8:
            continue
        dmin_all = min(dmin_all, d)
        if full[i] and full[j] and d < dmin_full:
            dmin_full = d
            pair_full = f"{s[i].label} ({s[i].species_string}) - {s[j].label} ({s[j].species_string})"
    row.update(dmin_all=dmin_all, dmin_full=dmin_full)
    if dmin_full < MIN_DIST:
        fails.append(f"fully occupied sites {pair_full} only {dmin_full:.3f} A apart")

    # bond-valence sums, one representative per crystallographic site (label)
    reps: dict[str, int] = {}
    for k, site in enumerate(s):
        reps.setdefault(site.label, k)
    worst = {"full": (0.0, ""), "part": (0.0, ""), "pmg": (0.0, "")}
    bvs_rows = []
    for lab, k in reps.items():
        site = s[k]
        occ, formal = site_formal(site)
        try:
            bvs = bvs_site(s, site)
        except KeyError as e:
            fails.append(f"site {lab}: {e.args[0]}")
            continue
        pmg = calculate_bv_sum_unordered(site, s.get_neighbors(site, PMG_RADIUS)) / occ
        dev, pdev = bvs - formal, pmg - formal
        bvs_rows.append((lab, site.species_string, occ, formal, bvs, dev, pmg, pdev))
        kind = "full" if occ >= FULL else "part"
        if abs(dev) > abs(worst[kind][0]):
            worst[kind] = (dev, lab)
        if occ >= FULL and abs(pdev) > abs(worst["pmg"][0]):
            worst["pmg"] = (pdev, lab)
        allowed = BVS_EXCEPTIONS.get((path.name, lab))
        if occ >= FULL and abs(dev) > BVS_TOL and allowed and abs(dev) <= allowed[0]:
            row.setdefault("excused", []).append(
                f"site {lab}: BVS {bvs:+.3f} v.u. vs formal {formal:+.3f} accepted "
                f"(|dev| <= {allowed[0]}): {allowed[1]}"
            )
        elif occ >= FULL and abs(dev) > BVS_TOL:
            fails.append(
                f"site {lab} ({site.species_string}): BVS {bvs:+.3f} v.u. vs formal "
                f"{formal:+.3f} (|dev| {abs(dev):.3f} > {BVS_TOL})"
            )
        if strict_pymatgen and occ >= FULL and abs(pdev) > BVS_TOL:
            fails.append(
                f"site {lab} ({site.species_string}): pymatgen BVS {pmg:+.3f} v.u. vs formal "
                f"{formal:+.3f} (|dev| {abs(pdev):.3f} > {BVS_TOL})"
            )
    row.update(worst=worst, bvs=bvs_rows)
    return row, fails


def check_references(csv_path: Path) -> list[str]:
    """Consistency of a references.csv: files exist, dimension 1-3, direction written as [uvw]
    for 1D, (hkl) plane normal for 2D, blank for 3D; barrier low <= high; from_memory filled
    whenever a barrier is given."""
    import csv
    import re

    bad = []
    with open(csv_path, newline="") as fh:
        rows = list(csv.DictReader(fh))
    for k, r in enumerate(rows, start=2):
        where = f"{csv_path.name} line {k}"
        if not (csv_path.parent / r["file"]).is_file():
            bad.append(f"{where}: no file {r['file']}")
        d, direction = r["dimension"], r["direction"].strip()
        pat = {"1": r"\[-?\d-?\d-?\d\]", "2": r"\(-?\d-?\d-?\d\)", "3": r""}.get(d)
        if pat is None:
            bad.append(f"{where}: dimension {d!r} is not 1, 2 or 3")
        elif not re.fullmatch(pat, direction):
            bad.append(f"{where}: direction {direction!r} does not suit a {d}D channel")
        lo, hi = r["barrier_low_eV"].strip(), r["barrier_high_eV"].strip()
        if lo or hi:
            if not (lo and hi) or float(lo) > float(hi):
                bad.append(f"{where}: barrier range {lo!r}..{hi!r} eV")
            if r["from_memory"] not in ("yes", "no") or not r["barrier_sources"].strip():
                bad.append(f"{where}: barrier without source or from_memory flag")
    return bad


def _fmt_worst(w: tuple[float, str]) -> str:
    return f"{w[0]:+.3f} {w[1]}" if w[1] else "-"


def default_bvparm() -> Path | None:
    """The IUCr table if it is at hand: $HOPMAP_BVPARM or ../shared/data/ next to the repo."""
    import os

    env = os.environ.get("HOPMAP_BVPARM")
    if env:
        return Path(env)
    p = Path(__file__).resolve().parent.parent.parent / "shared" / "data" / "bvparm2013.cif"
    return p if p.is_file() else None


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("roots", nargs="*", type=Path, help="CIF files or directories")
    ap.add_argument("-v", "--verbose", action="store_true", help="print the BVS of every site")
    ap.add_argument("--strict-pymatgen", action="store_true",
                    help="also fail on pymatgen's bond-valence sums")
    ap.add_argument("--bvparm", type=Path, default=None,
                    help="bvparm2013.cif to verify the embedded parameters against")
    args = ap.parse_args()
    roots = args.roots or [Path(__file__).resolve().parent.parent / "structures"]
    files = sorted(p for r in roots for p in ([r] if r.is_file() else r.rglob("*.cif")))
    if not files:
        print("no CIF files found under", ", ".join(map(str, roots)))
        return 1
    nfail = 0
    all_fails: list[tuple[Path | str, list[str]]] = []
    table = args.bvparm or default_bvparm()
    if table is not None:
        bad = verify_bv_params(table)
        print(f"bond-valence parameters: {len(BV_PARAMS)} embedded rows checked against {table}: "
              f"{'all found' if not bad else f'{len(bad)} differ'}")
        if bad:
            nfail += 1
            all_fails.append(("BV_PARAMS", bad))
    else:
        print("bond-valence parameters: embedded rows (bvparm2013.cif not found, not re-verified)")
    header = (
        f"{'file':34} {'formula':20} {'Z':>3} {'V/A^3':>8} {'space group (file)':>20} "
        f"{'spglib':>16} {'q/e':>7} {'dmin/A':>6} {'BVS dev full/v.u.':>18} "
        f"{'partial/v.u.':>14} {'pymatgen/v.u.':>14}"
    )
    print(header)
    print("-" * len(header))
    for p in files:
        try:
            row, fails = check_file(p, args.strict_pymatgen)
        except Exception as e:  # a file that cannot be read fails; the checker goes on
            nfail += 1
            all_fails.append((p, [f"could not be read: {e}"]))
            print(f"{_short(p):34} READ ERROR")
            continue
        w = row["worst"]
        print(
            f"{_short(p):34} {row['formula']:20} {row['Z']:>3.0f} {row['V']:>8.2f} "
            f"{row['sg_stated']:>20} {row['sg_found']:>16} {row['charge']:>+7.3f} "
            f"{row['dmin_full']:>6.3f} {_fmt_worst(w['full']):>18} {_fmt_worst(w['part']):>14} "
            f"{_fmt_worst(w['pmg']):>14}"
        )
        if args.verbose:
            for lab, sp, occ, formal, bvs, dev, pmg, pdev in row["bvs"]:
                print(
                    f"    {lab:6} {sp:26} occ {occ:5.3f} formal {formal:+6.3f} "
                    f"BVS {bvs:+6.3f} (dev {dev:+6.3f}) pymatgen {pmg:+6.3f} (dev {pdev:+6.3f}) v.u."
                )
        for note in row.get("excused", []):
            print(f"    note: {note}")
        if fails:
            nfail += 1
            all_fails.append((p, fails))
    for csv_path in sorted(p for r in roots if r.is_dir() for p in r.rglob("references.csv")):
        bad = check_references(csv_path)
        print(f"{_short(csv_path)}: {'consistent' if not bad else f'{len(bad)} problems'}")
        if bad:
            nfail += 1
            all_fails.append((csv_path, bad))
    print()
    print(
        f"{len(files)} files, {nfail} failing. Criteria: spglib (symprec {SYMPREC} A) = stated "
        f"space group; |q| <= {CHARGE_TOL} e/cell; fully occupied sites >= {MIN_DIST} A apart; "
        f"|BVS - formal| <= {BVS_TOL} v.u. on fully occupied sites (worst deviation shown, "
        f"with its site label)."
    )
    for p, fails in all_fails:
        print(f"FAIL {p}:")
        for f in fails:
            print(f"    {f}")
    return 1 if nfail else 0


def _short(p: Path) -> str:
    return "/".join(p.parts[-2:])


if __name__ == "__main__":
    sys.exit(main())

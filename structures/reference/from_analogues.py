#!/usr/bin/env python3
"""Writes the third batch of reference CIFs: simple structures whose coordinates are fixed by
symmetry, and analogues of files already in this folder (the same framework with another
mobile ion, another halide, or another transition metal).

Every entry says which numbers are quoted from memory and which are ours. Three kinds:

- coordinates fixed by symmetry, cell from memory of the handbook or the cited paper (rock-salt
  halides, the antiperovskite Li3OBr);
- analogues by exchange on a file of this folder, the rest of the structure kept (K and Ag
  beta-alumina from the Na file, the argyrodites Li6PS5Br and Li6PS5I from the Cl file, the
  thioantimonate Na3SbS4 and the selenophosphate Na3PSe4 in the cubic Na3PS4 type): the
  fractional coordinates are those of the parent, the cell is the remembered one of the
  analogue, and the one free parameter of the anion tetrahedron is set so that its bond length
  is the stated one;
- bond-valence models (the spinel MgSc2Se4; the olivines LiMnPO4, LiCoPO4, LiNiPO4 and
  heterosite FePO4): cell and coordinates of the parent, adjusted by a small bond-valence least
  squares of our own (bv_adjust below, as for the NASICON files of from_publications.py), the
  largest shift given in the header. These are MODELS of the published structures.

Run: python structures/reference/from_analogues.py [--out DIR]   (needs numpy, scipy, spglib)
Check: python tools/check_structures.py
"""

from __future__ import annotations

import argparse
import math
import os
import sys

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.dirname(HERE))
sys.path.insert(0, HERE)
from cifgen import element_of, oxidation_of, write_cif  # noqa: E402
import from_publications as fp  # noqa: E402
import make_reference as mr  # noqa: E402

MEMORY = fp.MEMORY

HANDBOOK = fp.HANDBOOK

# (cation, anion) -> (R0, b) for the oxidation states used here: the rows of
# tools/check_structures.py (IUCr table bvparm2013.cif, first-shell sets a, b, e)
BV = {
    ("Li", 1, "O"): (1.466, 0.37), ("P", 5, "O"): (1.617, 0.37),
    ("Fe", 2, "O"): (1.734, 0.37), ("Fe", 3, "O"): (1.759, 0.37),
    ("Mn", 2, "O"): (1.790, 0.37), ("Co", 2, "O"): (1.692, 0.37),
    ("Ni", 2, "O"): (1.675, 0.37),
    ("Mg", 2, "Se"): (2.32, 0.37), ("Sc", 3, "Se"): (2.44, 0.37),
    ("Li", 1, "S"): (1.94, 0.37), ("P", 5, "S"): (2.145, 0.37), ("Li", 1, "Cl"): (1.91, 0.37),
    ("Li", 1, "Br"): (2.02, 0.37), ("Li", 1, "I"): (2.22, 0.37),
}


def _entry(entries, file):
    for e in entries:
        if e["file"] == file:
            return dict(e)
    raise KeyError(file)


def _site_list(entry):
    return [list(s) for s in entry["sites"]]


# --- generic bond-valence sums and adjustment ---------------------------------------------


def bvs_of_sites(cell, hall, sites, reach=3.6):
    """Bond-valence sum of each asymmetric-unit site (contacts within `reach`, occupancy of the
    neighbour weighted). Returns [(label, formal, sum)]."""
    ops = fp._ops(hall)
    lat = fp._lattice(cell)
    full = []
    for lab, ts, x, y, z, occ in sites:
        for p in fp._orbit(ops, np.array([x, y, z], float)):
            full.append((element_of(ts), oxidation_of(ts), occ, p))
    shifts = np.array([[i, j, k] for i in (-1, 0, 1) for j in (-1, 0, 1) for k in (-1, 0, 1)])
    out = []
    for lab, ts, x, y, z, occ in sites:
        el, q, p = element_of(ts), oxidation_of(ts), np.array([x, y, z], float)
        v = 0.0
        for el2, q2, occ2, p2 in full:
            if q * q2 >= 0:
                continue
            (cat, cq), an = ((el, q), el2) if q > 0 else ((el2, q2), el)
            d = ((p2 - p + 0.5) % 1.0 - 0.5) + shifts
            dist = np.linalg.norm(d @ lat, axis=1)
            dist = dist[(dist < reach) & (dist > 1e-6)]
            if (cat, int(round(cq)), an) not in BV:
                if dist.size and dist.min() < 3.0:  # a real contact without a parameter
                    raise KeyError((cat, int(round(cq)), an))
                continue  # e.g. P and the free halide of the argyrodites, far apart
            r0, b = BV[(cat, int(round(cq)), an)]
            v += occ2 * float(np.sum(np.exp((r0 - dist) / b)))
        out.append((lab, abs(q), v))
    return out


def bv_adjust(cell, hall, sites, free, skip=(), restraint=0.05, ties=None):
    """Least squares on the free coordinates: residuals are (sum - formal) of every site whose
    label is not in `skip`, plus `restraint` v.u. per 0.01 A of shift of each free coordinate
    from its start. `free` maps a label to the indices (0, 1, 2 for x, y, z) that may move;
    coordinates fixed by the site symmetry are simply not listed; `ties` maps a label to
    (dependent index, free index) pairs for special positions such as (x,x,z). Returns (sites,
    largest shift in A)."""
    from scipy.optimize import least_squares

    lat = fp._lattice(cell)
    index = {s[0]: k for k, s in enumerate(sites)}
    slots = [(index[lab], i) for lab, idx in free.items() for i in idx]
    start = np.array([sites[k][2 + i] for k, i in slots], float)

    def build(p):
        out = [list(s) for s in sites]
        for (k, i), v in zip(slots, p):
            out[k][2 + i] = float(v)
        for lab, pairs in (ties or {}).items():
            for dep, src in pairs:
                out[index[lab]][2 + dep] = out[index[lab]][2 + src]
        return [tuple(s) for s in out]

    s0 = np.array([s[2:5] for s in sites], float)

    def moved(p):
        return (np.array([s[2:5] for s in build(p)], float) - s0) @ lat

    def resid(p):
        r = [v - q for lab, q, v in bvs_of_sites(cell, hall, build(p)) if lab not in skip]
        return np.concatenate([r, restraint * moved(p).ravel() / 0.01])

    fit = least_squares(resid, start, diff_step=1e-4, xtol=1e-10)
    p = np.round(fit.x, 4)
    return build(p), float(np.linalg.norm(moved(p), axis=1).max())


def bvs_table(cell, hall, before, after):
    b0 = bvs_of_sites(cell, hall, before)
    b1 = bvs_of_sites(cell, hall, after)
    return "; ".join(f"{lab} {v0:.2f} -> {v1:.2f}" for (lab, _, v0), (_, _, v1) in zip(b0, b1))


def wrap_text(s, width=95):
    import textwrap

    return "\n".join(textwrap.wrap(s, width))


# --- rock-salt halides ------------------------------------------------------------------------

ROCKSALT = [
    ("LiCl", "lithium chloride", "Li1+", "Cl1-", 5.1295),
    ("LiBr", "lithium bromide", "Li1+", "Br1-", 5.5013),
    ("LiI", "lithium iodide", "Li1+", "I1-", 6.0000),
    ("KBr", "potassium bromide", "K1+", "Br1-", 6.5982),
]


def rocksalt_entries():
    out = []
    for formula, name, cat, an, a in ROCKSALT:
        c, x = element_of(cat), element_of(an)
        out.append(fp.rocksalt(
            f"{formula}_rocksalt.cif", f"{formula}_rocksalt", f"{name}, rock salt", cat, an, a,
            f"""\
{formula}, rock salt (Fm-3m): {c} 4a (0,0,0), {x} 4b (1/2,1/2,1/2), a = {a:.4f} A.
{HANDBOOK}
Oxidation states: {c}+, {x}-."""))
    return out


# --- antiperovskite Li3OBr --------------------------------------------------------------------


def li3obr():
    return dict(
        file="Li3OBr_antiperovskite.cif", block="Li3OBr_antiperovskite",
        name="lithium oxide bromide, antiperovskite", z=1,
        cell=(4.02, 4.02, 4.02, 90, 90, 90), **fp.PM3M,
        comment=f"""\
Li3OBr, cubic antiperovskite (Pm-3m), the Br analogue of Li3OCl_antiperovskite.cif: O 1b
(1/2,1/2,1/2) in an octahedron of Li at 3c (0,1/2,1/2), Br 1a (0,0,0) in the cuboctahedral
cavity. Coordinates fixed by symmetry.
Source: Y. Zhao, L. L. Daemen, "Superionic conductivity in lithium-rich anti-perovskites",
J. Am. Chem. Soc. 134 (2012) 15042-15047 (the Li3OX family). Data used: a = 4.02 A.
{MEMORY}
Bond valence: O sums to about 1.38 v.u. (Li-O R0 = 1.466 A, Brown & Altermatt 1985): Li-O = a/2
is fixed by the cell, and the larger Br stretches it further than Cl does in Li3OCl; the known
underbonding of O in these antiperovskites (tools/check_structures.py lists the exception).
Oxidation states: Li+, O2-, Br-.""",
        sites=[
            ("O1", "O2-", 0.5, 0.5, 0.5, 1.0),
            ("Br1", "Br1-", 0.0, 0.0, 0.0, 1.0),
            ("Li1", "Li1+", 0.0, 0.5, 0.5, 1.0),
        ],
    )


# --- argyrodites by halide exchange -----------------------------------------------------------

PS_BOND_A = 2.0455  # P-S in Li6PS5Cl_argyrodite.cif (a = 9.85 A, x(S1) = 0.6199)


def argyrodite(halide, name, a):
    parent = _entry(mr.STRUCTURES, "Li6PS5Cl_argyrodite.cif")
    x = round(0.5 + PS_BOND_A / (math.sqrt(3) * a), 4)
    sites = []
    for lab, ts, px, py, pz, occ in parent["sites"]:
        if lab == "Cl1":
            lab, ts = f"{halide}1", f"{halide}1-"
        if lab == "S1":
            px = py = pz = x
        sites.append((lab, ts, px, py, pz, occ))
    cell = (a, a, a, 90, 90, 90)
    start = sites
    sites, shift = bv_adjust(cell, 512, start, {"S1": (0,), "Li1": (0, 2)},
                             ties={"S1": [(1, 0), (2, 0)], "Li1": [(1, 0)]})
    table = wrap_text(f"Bond-valence sums (v.u.; Li 48h half occupied) start -> adjusted: "
                      f"{bvs_table(cell, 512, start, sites)}.")
    li = next(s for s in sites if s[0] == "Li1")
    s1 = next(s for s in sites if s[0] == "S1")
    extra = {
        "Br": "In Li6PS5Br part of the Br exchanges with the S on 4c; that disorder is left out "
              "(ordered anion model: Br on 4a, S on 4c).",
        "I": "In Li6PS5I the anions are ordered (I on 4a, S on 4c), as written.",
    }[halide]
    return dict(
        file=f"Li6PS5{halide}_argyrodite.cif", block=f"Li6PS5{halide}_argyrodite",
        name=f"lithium thiophosphate {name}, argyrodite", z=4, cell=(a, a, a, 90, 90, 90),
        hm="F -4 3 m", number=216, hall=512, hall_symbol="F -4 2 3",
        comment=f"""\
Argyrodite Li6PS5{halide} (F-43m), the {name} analogue of Li6PS5Cl_argyrodite.cif: P 4b
(1/2,1/2,1/2) with S1 16e (x,x,x) forming PS4 tetrahedra; S2- on 4c (1/4,1/4,1/4) and
{halide}- on 4a (0,0,0); Li half fills 48h (x,x,z) (24 Li in 48 positions).
{extra}
Sources: H.-J. Deiseroth, S.-T. Kong, H. Eckert, J. Vannahme, C. Reiner, T. Zaiss, M. Schlosser,
Angew. Chem. Int. Ed. 47 (2008) 755-758 (the Li6PS5X family); cell a = {a} A as remembered
for Li6PS5{halide} (e.g. M. A. Kraft et al., J. Am. Chem. Soc. 139 (2017) 10909).
THIS IS A BOND-VALENCE MODEL, NOT THE PUBLISHED COORDINATES: it starts from the fractional
coordinates of the Cl file in this cell, with x(S1) = {x} so that P-S stays {PS_BOND_A} A (its
length in the Cl file); our bond-valence least squares (from_analogues.py, bv_adjust) then
moves x(S1) and the Li 48h (x,x,z) so that all sites approach their formal valences: largest
shift {shift:.3f} A. Adjusted: S1 x = {s1[2]:.4f}; Li1 ({li[2]:.4f}, {li[2]:.4f}, {li[4]:.4f}).
{table}
{MEMORY}
Oxidation states: Li+, P5+, S2-, {halide}-.""",
        sites=sites,
    )


# --- beta-aluminas by ion exchange ------------------------------------------------------------


def beta_alumina(ion, name, note):
    parent = _entry(fp.STRUCTURES, "NaAl11O17_beta_alumina.cif")
    sites = [(f"{ion}1", f"{ion}1+", *s[2:]) if s[0] == "Na1" else tuple(s) for s in parent["sites"]]
    return dict(
        file=f"{ion}Al11O17_beta_alumina.cif", block=f"{ion}_beta_alumina",
        name=f"{name} beta-alumina, ideal {ion}Al11O17 (ion-exchange model)", z=2,
        cell=parent["cell"], hm=parent["hm"], number=parent["number"], hall=parent["hall"],
        hall_symbol=parent["hall_symbol"],
        comment=f"""\
{name.capitalize()} beta-alumina, written for the ideal composition {ion}Al11O17 (P63/mmc) as the
ion-exchanged form of NaAl11O17_beta_alumina.cif: {ion} fully on the Beevers-Ross site 2d
(2/3,1/3,1/4), the framework (cell and all Al and O coordinates) that of the Na file
(C. R. Peters, M. Bettman, J. W. Moore, M. D. Glick, Acta Crystallogr. B27 (1971) 1826-1834).
Beta-alumina exchanges its Na for other monovalent ions in molten salts with little change of
the spinel blocks (Y.-F. Y. Yao, J. T. Kummer, J. Inorg. Nucl. Chem. 29 (1967) 2453).
{wrap_text(f"THIS IS AN ION-EXCHANGE MODEL: the refined {ion} position (and the small change of c) of {ion} beta-alumina are not used. {note}")}
{MEMORY}
Oxidation states: {ion}+, Al3+, O2-.""",
        sites=sites,
    )


# --- cubic Na3PS4-type chalcogenides ----------------------------------------------------------


def na3_cubic(file, block, name, center, chalc, a, bond, text):
    c_el, x_el = element_of(center), element_of(chalc)
    x = round(bond / (math.sqrt(3) * a), 4)
    return dict(
        file=file, block=block, name=name, z=2, cell=(a, a, a, 90, 90, 90),
        hm="I -4 3 m", number=217, hall=513, hall_symbol="I -4 2 3",
        comment=f"""\
{text}
Structure type of Na3PS4_cubic.cif (I-43m): {c_el} 2a (0,0,0) with {x_el} 8c (x,x,x) forming
{c_el}{x_el}4 tetrahedra; Na 6b (0,1/2,1/2), fully occupied in this model.
Data used: a = {a} A; x({x_el}) = {x} from the {c_el}-{x_el} length {bond} A.
{MEMORY}
Oxidation states: Na+, {c_el}5+, {x_el}2-.""",
        sites=[
            ("Na1", "Na1+", 0.0, 0.5, 0.5, 1.0),
            (f"{c_el}1", center, 0.0, 0.0, 0.0, 1.0),
            (f"{x_el}1", chalc, x, x, x, 1.0),
        ],
    )


# --- spinel MgSc2Se4 (bond-valence model) -----------------------------------------------------


def mgsc2se4():
    from scipy.optimize import fsolve

    hall = fp.FD3M_2["hall"]

    def sites(a, x):
        return [
            ("Mg1", "Mg2+", 0.125, 0.125, 0.125, 1.0),
            ("Sc1", "Sc3+", 0.5, 0.5, 0.5, 1.0),
            ("Se1", "Se2-", x, x, x, 1.0),
        ]

    def f(p):
        a, x = p
        b = {lab: v for lab, _, v in bvs_of_sites((a, a, a, 90, 90, 90), hall, sites(a, x))}
        return [b["Mg1"] - 2.0, b["Sc1"] - 3.0]

    a, x = fsolve(f, [11.1, 0.257])
    a, x = round(float(a), 3), round(float(x), 4)
    return dict(
        file="MgSc2Se4_spinel.cif", block="MgSc2Se4_spinel",
        name="magnesium scandium selenide, spinel (bond-valence model)", z=8,
        cell=(a, a, a, 90, 90, 90), **fp.FD3M_2,
        comment=f"""\
Spinel MgSc2Se4 (Fd-3m, ORIGIN CHOICE 2): Mg 8a (1/8,1/8,1/8) tetrahedral, Sc 16d
(1/2,1/2,1/2) octahedral, Se 32e (x,x,x); the octahedral 16c sites (0,0,0) are empty. Mg2+
moves 8a-16c-8a, as Li in LiMn2O4.
Source of the compound and its spinel structure: P. Canepa, S.-H. Bo, G. Sai Gautam et al.,
"High magnesium mobility in ternary spinel chalcogenides", Nat. Commun. 8 (2017) 1759 (cell
about 11.1-11.2 A as remembered).
THIS IS A BOND-VALENCE MODEL, NOT THE PUBLISHED REFINEMENT: a and x solved (our script,
from_analogues.py) so that Mg and Sc sum to their formal valences with the IUCr parameters
Mg-Se R0 = 2.32 A and Sc-Se R0 = 2.44 A (Brese & O'Keeffe 1991, b = 0.37 A):
a = {a} A, x(Se) = {x}, Mg-Se 2.58 A, Sc-Se 2.70 A. The cell agrees with the remembered
published one to within about 0.5 %.
Oxidation states: Mg2+, Sc3+, Se2-.""",
        sites=sites(a, x),
    )


# --- olivines (bond-valence models from LiFePO4) ----------------------------------------------

OLIVINES = [
    dict(metal="Mn", name="lithium manganese phosphate, olivine (lithiophilite)",
         cell=(10.446, 6.103, 4.744),
         source="S. Geller, J. L. Durand, Acta Crystallogr. 13 (1960) 325"),
    dict(metal="Co", name="lithium cobalt phosphate, olivine", cell=(10.206, 5.922, 4.701),
         source="F. Kubel, Z. Kristallogr. 209 (1994) 755"),
    dict(metal="Ni", name="lithium nickel phosphate, olivine", cell=(10.032, 5.854, 4.677),
         source="S. C. Abrahams, K. Easson, Acta Crystallogr. C49 (1993) 925"),
]

OLIVINE_FREE = {"P1": (0, 2), "O1": (0, 2), "O2": (0, 2), "O3": (0, 1, 2)}


def olivine(metal, name, cell, source, lithium=True, ox=2, restraint=0.05):
    parent = _entry(mr.STRUCTURES, "LiFePO4_olivine.cif")
    start = []
    for lab, ts, x, y, z, occ in parent["sites"]:
        if lab == "Fe1":
            lab, ts = f"{metal}1", f"{metal}{ox}+"
        if lab == "Li1" and not lithium:
            continue
        start.append((lab, ts, x, y, z, occ))
    cell6 = (*cell, 90, 90, 90)
    hall = parent["hall"]
    free = {f"{metal}1": (0, 2), **OLIVINE_FREE}
    sites, shift = bv_adjust(cell6, hall, start, free, skip=("Li1",), restraint=restraint)
    table = wrap_text(f"Bond-valence sums (v.u.) start -> adjusted: {bvs_table(cell6, hall, start, sites)}.")
    formula = f"Li{metal}PO4" if lithium else f"{metal}PO4"
    coords = wrap_text("Adjusted: " + "; ".join(
        f"{s[0]} ({s[2]:.4f}, {s[3]:.4f}, {s[4]:.4f})" for s in sites) + ".")
    cell_text = wrap_text(f"Cell: {source}; a = {cell[0]}, b = {cell[1]}, c = {cell[2]} A, from memory.")
    host = ("" if lithium else
            " A host without lithium (heterosite, the delithiated end member of LiFePO4): the "
            "M1 chains of octahedral 4a sites along b are empty, and Li is the probe.")
    return dict(
        file=f"{formula}_olivine.cif", block=f"{formula}_olivine", name=name, z=4,
        cell=cell6, hm="P n m a", number=62, hall=hall, hall_symbol=parent["hall_symbol"],
        comment=f"""\
Olivine {formula}, space group Pnma (No. 62), the setting of LiFePO4_olivine.cif
{wrap_text(f"(a > b > c): {metal} on the mirror 4c (M2), P 4c, O1 and O2 4c, O3 8d" + (", Li on 4a (M1)." if lithium else ".") + host)}
{cell_text}
THIS IS A BOND-VALENCE MODEL, NOT THE PUBLISHED COORDINATES: it starts from the fractional
coordinates of LiFePO4_olivine.cif (Streltsov et al. 1993) in this cell, with {metal}{ox}+ for Fe2+,
and our bond-valence least squares (from_analogues.py, bv_adjust) moves the {metal}, P and O
coordinates{' (Li fixed on its inversion centre)' if lithium else ''} so that {metal}, P and O approach their formal
valences: largest shift {shift:.3f} A.
{table}
{coords}
Oxidation states: {'Li+, ' if lithium else ''}{metal}{ox}+, P5+, O2-.""",
        sites=sites,
    )


def heterosite():
    e = olivine("Fe", "iron phosphate, olivine-type heterosite (delithiated LiFePO4)",
                (9.821, 5.792, 4.788),
                "A. S. Andersson, B. Kalska, L. Haggstrom, J. O. Thomas, Solid State Ionics 130 "
                "(2000) 41", lithium=False, ox=3, restraint=0.02)
    return e


def entries():
    out = rocksalt_entries()
    out.append(li3obr())
    out.append(argyrodite("Br", "bromide", 9.98))
    out.append(argyrodite("I", "iodide", 10.14))
    out.append(beta_alumina(
        "K", "potassium",
        "K on the Beevers-Ross site fits better than Na (bond-valence sum near 1 v.u.)."))
    out.append(beta_alumina(
        "Ag", "silver",
        "Ag on the Beevers-Ross site is underbonded, as Na is (tools/check_structures.py lists "
        "the exception)."))
    out.append(na3_cubic(
        "Na3PSe4_cubic.cif", "Na3PSe4_cubic", "sodium selenophosphate, cubic", "P5+", "Se2-",
        7.3094, 2.20,
        """\
Cubic Na3PSe4 (I-43m), the selenium analogue of cubic Na3PS4.
Source: L. Zhang et al., "Na3PSe4: a novel chalcogenide solid electrolyte with high ionic
conductivity", Adv. Energy Mater. 5 (2015) 1501294 (cubic, a = 7.3094 A as remembered);
P-Se = 2.20 A, the usual length of a PSe4 tetrahedron (from memory)."""))
    out.append(na3_cubic(
        "Na3SbS4_cubic.cif", "Na3SbS4_cubic", "sodium thioantimonate, cubic (model)", "Sb5+",
        "S2-", 7.20, 2.33,
        """\
Na3SbS4 in the cubic Na3PS4 type (I-43m). THIS IS A MODEL: at room temperature Na3SbS4 is
tetragonal (P-421c, a = 7.16, c = 7.29 A as remembered, e.g. from A. Banerjee et al., Angew.
Chem. Int. Ed. 55 (2016) 9634, and H. Wang et al., Angew. Chem. Int. Ed. 55 (2016) 8551), a
small distortion (c/a = 1.02) of this cubic arrangement, which the compound takes at higher
temperature (from memory). Here a = 7.20 A is the cube root of the tetragonal cell volume;
Sb-S = 2.33 A, the length of the SbS4 tetrahedron (from memory).
Bond valence: with the only Sb-S parameter of the IUCr table whose valence fits (Sb of
unspecified valence, R0 = 2.45 A, Brese & O'Keeffe 1991) Sb sums to about 5.6 v.u.; tools/
check_structures.py lists the exception."""))
    out.append(mgsc2se4())
    for o in OLIVINES:
        out.append(olivine(o["metal"], o["name"], o["cell"], o["source"]))
    out.append(heterosite())
    return out


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--out", default=HERE, help="output folder (default: this folder)")
    ap.add_argument("--only", nargs="*", help="write only these file names")
    args = ap.parse_args()
    for st in entries():
        st = dict(st)
        name = st.pop("file")
        if args.only and name not in args.only:
            continue
        path = os.path.join(args.out, name)
        write_cif(path, **st)
        print("wrote", path)
    return 0


if __name__ == "__main__":
    sys.exit(main())

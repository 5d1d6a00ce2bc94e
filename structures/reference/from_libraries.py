#!/usr/bin/env python3
"""Writes the reference CIFs of this folder that come from named libraries and open databases.

Sources (each file's header repeats its own):

- pymatgen (MIT licence) ships Materials-Project structures as JSON in
  pymatgen/util/structures/*.json; most are DFT-relaxed (GGA/GGA+U) entries of the Materials
  Project, some carry a material id in their "history" record. Read with
  pymatgen.core.Structure.from_file.
- pymatgen's test files LiFePO4.cif (tests/files/chgden/) and lgps.cif (tests/files/io/lammps/),
  as distributed in ../shared/structures/ (LiFePO4_dft.cif, Li10GeP2S12_dft.cif) with a short
  header that is kept below.
- The Crystallography Open Database (COD; open data, attribution to the journal article asked
  for in each entry), from ../shared/cif-corpus/inorganic/.

For every structure: the oxidation states are set explicitly (listed in OXIDATION below, one
state per element unless a site is mixed); spglib (symprec SYMPREC_A) finds the space group and
its standardized conventional cell; when the standardized positions move no atom by more than
CLEAN_A the file is written in that conventional cell with the operators of spglib's setting
(through cifgen.write_cif, as make_reference.py does), otherwise the file stays P1 and says so.
Disordered entries (partial occupancies) are symmetrised with each distinct site composition as
its own atom type.

Run: python structures/reference/from_libraries.py   (needs pymatgen, spglib, numpy, gemmi)
Without ../shared the pymatgen-JSON entries are still written; the others are skipped with a
note (their CIFs are committed).
Check: python tools/check_structures.py
"""

from __future__ import annotations

import importlib.metadata
import json
import textwrap
import os
import sys
from pathlib import Path

import numpy as np
import spglib

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))
from cifgen import write_cif  # noqa: E402

SHARED = HERE.parent.parent.parent / "shared"
SYMPREC_A = 1e-3
CLEAN_A = 0.01


def pymatgen_json_dir() -> Path:
    import pymatgen.core

    return Path(pymatgen.core.__file__).resolve().parent.parent / "util" / "structures"


def pymatgen_version() -> str:
    return importlib.metadata.version("pymatgen")


def material_id(path: Path) -> str | None:
    d = json.loads(path.read_text())
    for h in d.get("history", []) or []:
        if isinstance(h, dict) and h.get("materialsid"):
            return str(h["materialsid"])
    return None


def species_key(site) -> tuple:
    return tuple(sorted((sp.symbol, round(float(o), 6)) for sp, o in site.species.items()))


def symmetrise(struct, symprec: float = SYMPREC_A):
    """Standardized conventional cell and asymmetric unit, or None when not clean.

    Returns dict(cell, hall, hall_symbol, number, hm, sites=[(elements_occ, frac)], moved_a)."""
    keys: dict[tuple, int] = {}
    types = [keys.setdefault(species_key(s), len(keys) + 1) for s in struct]
    inv = {v: k for k, v in keys.items()}
    cell = (struct.lattice.matrix, struct.frac_coords, types)
    ds = spglib.get_symmetry_dataset(cell, symprec=symprec)
    if ds is None:
        return None
    # how far the idealised positions are from the input ones (in the input's frame)
    std_lat, std_pos, std_types = spglib.standardize_cell(
        cell, to_primitive=False, no_idealize=False, symprec=symprec
    )
    std_lat_raw, std_pos_raw, std_types_raw = spglib.standardize_cell(
        cell, to_primitive=False, no_idealize=True, symprec=symprec
    )
    # how far idealising moves the cell and the atoms: cell lengths and angles of the
    # idealised against the non-idealised standardized cell; atoms by pymatgen's
    # StructureMatcher (largest displacement after the best superposition, in A)
    from pymatgen.core import Lattice, Structure
    from pymatgen.analysis.structure_matcher import StructureMatcher

    li, lr = Lattice(std_lat), Lattice(std_lat_raw)
    strain = float(max(abs(x / y - 1) for x, y in zip(li.abc, lr.abc)))
    dangle = float(max(abs(x - y) for x, y in zip(li.angles, lr.angles)))
    ideal = Structure(li, [str(inv[t][0][0]) for t in std_types], std_pos)
    raw = Structure(lr, [str(inv[t][0][0]) for t in std_types_raw], std_pos_raw)
    sm = StructureMatcher(ltol=0.05, stol=0.3, angle_tol=2, primitive_cell=False, scale=False,
                          attempt_supercell=False, allow_subset=False)
    rms = sm.get_rms_dist(raw, ideal)
    moved = float(rms[1] * (raw.volume / len(raw)) ** (1 / 3)) if rms else float("inf")
    ds2 = spglib.get_symmetry_dataset((std_lat, std_pos, std_types), symprec=symprec)
    sgt = spglib.get_spacegroup_type(ds2.hall_number)
    a, b, c = (float(np.linalg.norm(v)) for v in std_lat)
    ang = lambda u, v: float(np.degrees(np.arccos(np.dot(u, v) / np.linalg.norm(u) / np.linalg.norm(v))))  # noqa: E731
    al, be, ga = ang(std_lat[1], std_lat[2]), ang(std_lat[0], std_lat[2]), ang(std_lat[0], std_lat[1])
    reps = []
    seen = set()
    for i, e in enumerate(ds2.equivalent_atoms):
        if e in seen:
            continue
        seen.add(e)
        reps.append((inv[std_types[e]], np.array(std_pos[e]) % 1.0, ds2.wyckoffs[e]))
    return dict(
        cell=(a, b, c, al, be, ga),
        lattice=std_lat,
        hall=ds2.hall_number,
        hall_symbol=sgt.hall_symbol,
        number=sgt.number,
        hm=sgt.international_full,
        hm_short=sgt.international_short,
        sites=reps,
        moved_a=moved,
        strain=strain,
        dangle=dangle,
        symprec=symprec,
        natoms=len(std_types),
    )


def type_symbol(el: str, ox: float) -> str:
    mag = abs(ox)
    m = "" if abs(mag - 1) < 1e-9 else (f"{mag:g}")
    return f"{el}{m}{'+' if ox > 0 else '-'}"


def spaced_hm(hall_symbol: str) -> str:
    """Hermann-Mauguin symbol with spaces ('P 42/m n m'), from gemmi's space-group table."""
    import gemmi

    sg = gemmi.find_spacegroup_by_ops(gemmi.symops_from_hall(hall_symbol))
    return sg.hm


def round_cell(cell):
    return tuple(round(float(x), 5) for x in cell)


def tidy(v: float) -> float:
    """Snap fractional coordinates to simple fractions (spglib idealised them already)."""
    for den in (2, 3, 4, 6, 8, 12, 24):
        n = round(v * den)
        if abs(v * den - n) < 1e-6:
            return (n / den) % 1.0
    return round(float(v) % 1.0, 6)


def write_symmetrised(
    struct, *, file: str, block: str, name: str, comment: str, oxidation: dict, z: int,
    occupancy_override: dict | None = None, symprec: float = SYMPREC_A,
) -> dict:
    sym = symmetrise(struct, symprec)
    if sym is None or sym["moved_a"] > CLEAN_A:
        raise SystemExit(f"{file}: not clean at symprec {symprec} A (moved {sym and sym['moved_a']})")
    sites = []
    counters: dict[str, int] = {}
    for comp, frac, wyck in sym["sites"]:
        x, y, zz = (tidy(t) for t in frac)
        for el, occ in comp:
            counters[el] = counters.get(el, 0) + 1
            label = f"{el}{counters[el]}"
            if occupancy_override and (el, round(occ, 6)) in occupancy_override:
                occ = occupancy_override[(el, round(occ, 6))]
            sites.append((label, type_symbol(el, oxidation[el]), x, y, zz, occ))
    header = comment.rstrip("\n") + "\n" + textwrap.fill(
        f"Symmetrised with spglib {spglib.__version__} (symprec {sym['symprec']:g} A): space group "
        f"{sym['hm_short']} (No. {sym['number']}), Hall setting {sym['hall']}, conventional "
        f"standard cell of {sym['natoms']} positions; largest idealisation shift of an atom "
        f"{sym['moved_a']:.4f} A, of a cell length {100 * sym['strain']:.3f} %, of a cell angle "
        f"{sym['dangle']:.3f} deg. "
        f"Cell rounded to 1e-5 A and 1e-5 deg, coordinates to 1e-6.",
        width=95,
    )
    write_cif(
        str(HERE / file),
        block=block,
        comment=header,
        cell=round_cell(sym["cell"]),
        hm=spaced_hm(sym["hall_symbol"]),
        number=sym["number"],
        hall=sym["hall"],
        hall_symbol=sym["hall_symbol"],
        z=z,
        sites=sites,
        name=name,
    )
    return sym


# Oxidation states set explicitly (formal), per file.
OXIDATION = {
    "Li2O": {"Li": 1, "O": -2},
    "NaFePO4": {"Na": 1, "Fe": 2, "P": 5, "O": -2},
    "TiO2": {"Ti": 4, "O": -2},
    "VO2": {"V": 4, "O": -2},
    "Li3V2(PO4)3": {"Li": 1, "V": 3, "P": 5, "O": -2},
    "Li10GeP2S12": {"Li": 1, "Ge": 4, "P": 5, "S": -2},
    "LiFePO4_dft": {"Li": 1, "Fe": 2, "P": 5, "O": -2},
    "Li10GeP2S12_dft": {"Li": 1, "Ge": 4, "P": 5, "S": -2},
    "NaYS2": {"Na": 1, "Y": 3, "S": -2},
    "KYS2": {"K": 1, "Y": 3, "S": -2},
}


def states(ox: dict) -> str:
    return ", ".join(type_symbol(el, v) for el, v in ox.items())


def from_pymatgen_json(stem: str) -> tuple:
    from pymatgen.core import Structure

    p = pymatgen_json_dir() / f"{stem}.json"
    s = Structure.from_file(str(p))
    mid = material_id(p)
    src = textwrap.fill(
        f"Source: pymatgen {pymatgen_version()} (MIT licence), file "
        f"pymatgen/util/structures/{stem}.json, "
        + (f"Materials Project entry {mid} (its 'history' record)" if mid else "no material id in the JSON")
        + ".",
        width=95,
    )
    return s, src


def read_cif_pmg(path: Path):
    import warnings

    from pymatgen.io.cif import CifParser

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return CifParser(str(path)).parse_structures(primitive=False)[0]


def header_of(path: Path) -> str:
    lines = []
    for ln in path.read_text().splitlines():
        if not ln.startswith("#"):
            break
        lines.append(ln.lstrip("#").rstrip())
    return "\n".join(lines).strip("\n")


def main() -> int:
    written = []

    # --- pymatgen JSON entries -------------------------------------------------------------
    s, src = from_pymatgen_json("Li2O")
    written.append(write_symmetrised(
        s, file="Li2O_antifluorite_mp.cif", block="Li2O_antifluorite_mp",
        name="lithium oxide, antifluorite (DFT-relaxed)", z=4, oxidation=OXIDATION["Li2O"],
        symprec=0.05,
        comment=f"""\
Li2O, antifluorite (Fm-3m): O on the fcc 4a sites, Li in every tetrahedral hole (8c); the
octahedral holes (4b) are empty. A DFT-relaxed structure: the conventional cell edge, 4.659 A,
is about 1 % above the measured 4.61 A, as GGA gives.
The JSON's rhombohedral primitive cell has alpha = 60.13 deg instead of 60 (a relaxation
residue): at symprec 1e-3 A spglib finds R-3m; at 0.05 A Fm-3m, which is what is written
(the cubic cell changes the angles by 0.11 deg and moves atoms by 0.001 A).
{src}
The JSON holds the rhombohedral primitive cell (3 atoms); written here in the cubic cell.
Oxidation states: Li+, O2- (formal).""",
    ))

    s, src = from_pymatgen_json("NaFePO4")
    written.append(write_symmetrised(
        s, file="NaFePO4_olivine_mp.cif", block="NaFePO4_olivine_mp",
        name="sodium iron phosphate, olivine (DFT-relaxed)", z=4, oxidation=OXIDATION["NaFePO4"],
        symprec=0.01,
        comment=f"""\
Olivine NaFePO4 (Pnma; not the thermodynamically stable maricite, which has Na and Fe swapped
and no Na channel): Na on the inversion centres 4a (M1), Fe on 4c (M2). DFT-relaxed.
{src}
The JSON cell is in a permuted setting (a = 5.00, b = 6.29, c = 10.44 A); spglib's standard
Pnma setting below has b = 6.29 A, the chain direction of M1. The JSON's beta is 89.97 deg, so
spglib finds only Pm at symprec 1e-3 A and Pnma at 0.01 A, which is written (0.03 deg, 0.005 A).
Oxidation states: Na+, Fe2+, P5+, O2- (formal).""",
    ))

    s, src = from_pymatgen_json("TiO2")
    written.append(write_symmetrised(
        s, file="TiO2_bronze_mp.cif", block="TiO2_B_bronze_mp",
        name="titanium dioxide, TiO2(B) bronze (DFT-relaxed)", z=8, oxidation=OXIDATION["TiO2"],
        comment=f"""\
TiO2(B), the monoclinic bronze polymorph (C2/m, Z = 8): double layers of edge-sharing TiO6
octahedra joined by corners, with open channels along b. This is the only TiO2 entry pymatgen
ships; its Materials Project id belongs to the C2/m bronze (12 atoms in the JSON's primitive
cell; the conventional cell has 24). The identification as TiO2(B) rests on the space group,
Z and cell (a ~ 12.2, b ~ 3.8, c ~ 6.5 A, beta ~ 107 deg; the bronze cell of Marchand, Brohan
& Tournoux, Mater. Res. Bull. 15 (1980) 1129, quoted from memory). A host without lithium.
{src}
Oxidation states: Ti4+, O2- (formal).""",
    ))

    s, src = from_pymatgen_json("VO2")
    written.append(write_symmetrised(
        s, file="VO2_rutile_mp.cif", block="VO2_rutile_mp",
        name="vanadium dioxide, rutile form (DFT-relaxed)", z=2, oxidation=OXIDATION["VO2"],
        comment=f"""\
VO2 in the rutile structure (P4_2/mnm), the high-temperature form (the monoclinic M1 form is
stable below about 340 K). A host without lithium: octahedral channels along c.
{src}
The JSON has c as its first axis; the standard setting below has c = 3.035 A.
Oxidation states: V4+, O2- (formal).""",
    ))

    s, src = from_pymatgen_json("Li3V2(PO4)3")
    written.append(write_symmetrised(
        s, file="Li3V2PO43_nasicon_mp.cif", block="Li3V2_PO4_3_nasicon_mp",
        name="lithium vanadium phosphate, rhombohedral NASICON framework, Li ordered (DFT)",
        z=4, oxidation=OXIDATION["Li3V2(PO4)3"],
        comment=f"""\
Li3V2(PO4)3 on the rhombohedral NASICON framework (lantern units V2(PO4)3), with an ordered
arrangement of Li that lowers the symmetry to C2 (the JSON holds the 40-atom rhombohedral
primitive cell, alpha ~ 61 deg; spglib finds C2 at every tolerance tried, 1e-3 to 0.2 A).
The commercially made Li3V2(PO4)3 is the monoclinic (P2_1/n) polymorph, not this one.
{src}
Oxidation states: Li+, V3+, P5+, O2- (formal). Conventional C2 cell: 80 positions.""",
    ))

    # Not written: Li10GeP2S12.json (disordered, P4_2/nmc). Its PS4 tetrahedron on 2b has
    # P-S = 1.96 A (bond-valence sum of P 6.6 v.u. against 5), far from any refinement, and its
    # formal charge is +0.14 e per cell; the ordered DFT structure below is used instead.

    # --- pymatgen test files, as distributed in ../shared/structures -------------------------
    for stem, file, block, name, z, extra in [
        ("LiFePO4_dft", "LiFePO4_olivine_dft.cif", "LiFePO4_olivine_dft",
         "lithium iron phosphate, olivine (DFT-relaxed)", 4,
         "Olivine LiFePO4 (Pnma), Li on 4a (M1): chains along b."),
        ("Li10GeP2S12_dft", "Li10GeP2S12_ordered_dft.cif", "Li10GeP2S12_ordered_dft",
         "lithium germanium thiophosphate, LGPS, ordered (DFT)", 2,
         "An ordered Li10GeP2S12: every Li site full, Ge and P on distinct 4d/2b positions, "
         "as used for DFT (compare Mo, Ong & Ceder, Chem. Mater. 24 (2012) 15)."),
    ]:
        src_path = SHARED / "structures" / f"{stem}.cif"
        if not src_path.is_file():
            print(f"skipped {file}: {src_path} not found (the committed file stays)")
            continue
        s = read_cif_pmg(src_path)
        written.append(write_symmetrised(
            s, file=file, block=block, name=name, z=z, oxidation=OXIDATION[stem],
            comment=f"""\
{extra}
Header of the source file (kept):
{header_of(src_path)}
Taken from ../shared/structures/{stem}.cif, which carries that header; the file had no
oxidation states and was written in P1.
Oxidation states: {states(OXIDATION[stem])} (formal, set by us).""",
        ))

    # --- COD refinements -----------------------------------------------------------------
    cod = SHARED / "cif-corpus" / "inorganic"
    for cod_id, corpus_file, stem, file, block, name, z, text in [
        ("2019542", "spacegroup-builder__cif__2019542.cif", "NaYS2", "NaYS2_O3_cod.cif",
         "NaYS2_O3_cod", "sodium yttrium sulfide, O3 layered (alpha-NaFeO2 type)", 3,
         "J. Fabry, L. Havlak, M. Kucerakova, M. Dusek, \"Redetermination of NaGdS2, NaLuS2 and "
         "NaYS2\", Acta Cryst. C70 (2014) 533-535 (single crystal, 301.5 K)"),
        ("2105803", "spacegroup-builder__cif__2105803.cif", "KYS2", "KYS2_O3_cod.cif",
         "KYS2_O3_cod", "potassium yttrium sulfide, O3 layered (alpha-NaFeO2 type)", 3,
         "J. Fabry, L. Havlak, M. Dusek, P. Vanek, J. Drahokoupil, K. Jurek, \"Structure "
         "determination of KLaS2, KPrS2, KEuS2, KGdS2, KLuS2, KYS2, RbYS2, NaLaS2 and "
         "crystal-chemical analysis of the group 1 and thallium(I) rare-earth sulfide series\", "
         "Acta Cryst. B70 (2014) 360-371 (single crystal)"),
    ]:
        src_path = cod / corpus_file
        if not src_path.is_file():
            print(f"skipped {file}: {src_path} not found (the committed file stays)")
            continue
        s = read_cif_pmg(src_path)
        written.append(write_symmetrised(
            s, file=file, block=block, name=name, z=z, oxidation=OXIDATION[stem],
            comment=f"""\
{stem}, layered alpha-NaFeO2 type (R-3m, hexagonal axes, O3 stacking): YS6 octahedral layers,
the alkali ion in octahedra between them.
Source: Crystallography Open Database entry {cod_id} (open data; attribution to the journal
article asked for): {text}. Read from the COD test corpus copy
(../shared/cif-corpus/inorganic/{corpus_file}); data used: cell, space group, coordinates,
occupancies; standard uncertainties dropped.
Oxidation states: {states(OXIDATION[stem])} (formal, set by us).""",
        ))

    print(f"wrote {len(written)} files")
    return 0


if __name__ == "__main__":
    sys.exit(main())

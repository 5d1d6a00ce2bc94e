#!/usr/bin/env python3
"""Cross-check of `hopmap neb` and `hopmap populate` with ASE (an independent reader).

Runs the hopmap binary on olivine LiFePO4 and FePO4 (structures/reference, published
crystallography) in a temporary folder and reads what it wrote with ASE:

- every POSCAR (00 ... 06) and images.xyz read back, with the same atoms in the same order
  and the same positions (to 1e-5 A);
- the first and last images put the moving ion (atom 0) on Li sites of the input CIF as ASE
  itself reads and expands it, b/2 = 3.005 A apart along b (Morgan, Van der Ven & Ceder,
  Electrochem. Solid-State Lett. 7 (2004) A30: the Li hop of olivine runs along b between
  neighbouring M1 sites);
- no image puts the ion closer than 1.6 A to a framework atom (ASE's minimum-image
  distances; Li-O contacts below about 1.8 A are not found in ordered oxides, common practice);
- the supercell's shortest lattice vector (ASE's Minkowski reduction) is at least the 9 A
  asked, and the cell equals the stated supercell matrix times the CIF's cell;
- the images' energies in neb.json equal those in images.xyz, and the ends are the lowest;
- `populate` of FePO4 at x = 1: ASE reads the CIF and the POSCAR, four Li, at least 2.5 A
  apart, on the M1 sites of LiFePO4 (within 0.3 A: the cells of the two phases differ).

Exit 0 when every check passes, 1 otherwise. Usage: check_neb.py [--hopmap BIN]
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np
from ase.geometry import get_distances, minkowski_reduce
from ase.io import read

REPO = Path(__file__).resolve().parent.parent
REF = REPO / "structures" / "reference"
CONTACT_A = 1.6
MIN_IMAGE_A = 9.0

failures = []


def check(ok, text):
    print(f"check_neb: {'ok    ' if ok else 'FAILED'} {text}")
    if not ok:
        failures.append(text)


def frac_dist(cell, a, b):
    """Minimum-image distance (A) between fractional positions a and b of one cell."""
    d = np.asarray(a) - np.asarray(b)
    d -= np.round(d)
    best = np.inf
    for s in np.array(np.meshgrid([-1, 0, 1], [-1, 0, 1], [-1, 0, 1])).T.reshape(-1, 3):
        best = min(best, float(np.linalg.norm((d + s) @ cell)))
    return best


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--hopmap", default=os.environ.get("HOPMAP_BIN",
                                                       str(REPO / "target/release/hopmap")))
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        out = tmp / "neb"
        cif = REF / "LiFePO4_olivine.cif"
        subprocess.run([args.hopmap, "neb", str(cif), "--ion", "Li", "--out", str(out), "-q"],
                       check=True, stdout=subprocess.DEVNULL)
        doc = json.loads((out / "neb.json").read_text())
        check(doc["schema"] == "hopmap.neb/1", f"neb.json schema {doc['schema']}")
        n = len(doc["images"])
        check(n == 7, f"{n} images (5 intermediate and the two ends)")
        poscars = [read(str(out / f"{k:02d}" / "POSCAR"), format="vasp") for k in range(n)]
        frames = read(str(out / "images.xyz"), index=":", format="extxyz")
        check(len(frames) == n, f"images.xyz holds {len(frames)} frames")
        same = all(
            p.get_chemical_symbols() == f.get_chemical_symbols()
            and np.allclose(p.cell, f.cell, atol=1e-6)
            and np.abs(get_distances(p.positions, f.positions, cell=p.cell, pbc=True)[1]
                       .diagonal()).max() < 1e-5
            for p, f in zip(poscars, frames))
        check(same, "every POSCAR equals its frame of images.xyz (species, order, positions)")
        natoms = {len(p) for p in poscars}
        check(natoms == {doc["supercell"]["atoms"]},
              f"{natoms} atoms per image; neb.json says {doc['supercell']['atoms']}")
        m = doc["moving_atom_index"]
        check(all(p[m].symbol == "Li" for p in poscars), "atom 0 is the moving Li in every image")

        # the supercell against ASE's reading of the CIF
        unit = read(str(cif))
        mat = np.array(doc["supercell"]["matrix"], dtype=float)
        want_cell = mat @ np.array(unit.cell)
        check(np.allclose(np.array(poscars[0].cell), want_cell, atol=1e-4),
              f"supercell = matrix {doc['supercell']['multiples']} x the CIF's cell (ASE)")
        red, _ = minkowski_reduce(np.array(poscars[0].cell))
        shortest = float(np.linalg.norm(red, axis=1).min())
        check(shortest >= MIN_IMAGE_A - 1e-9,
              f"periodic images of the moving ion {shortest:.2f} A apart (>= {MIN_IMAGE_A} A)")

        # the ends on Li sites of the CIF as ASE expands it
        li = unit.get_scaled_positions()[[s == "Li" for s in unit.get_chemical_symbols()]]
        ucell = np.array(unit.cell)
        for name, p in (("first", poscars[0]), ("last", poscars[-1])):
            f = np.linalg.solve(ucell.T, p.positions[m]) % 1.0
            d = min(frac_dist(ucell, f, x) for x in li)
            check(d < 1e-4, f"{name} image on a Li site of the CIF ({d:.1e} A off)")
        d = get_distances(poscars[0].positions[m], poscars[-1].positions[m],
                          cell=poscars[0].cell, pbc=True)[0][0][0]
        check(abs(np.linalg.norm(d) - 3.005) < 0.01 and abs(d[1]) > 3.0,
              f"end points {np.linalg.norm(d):.3f} A apart, along b ({d.round(3)})")

        # contacts
        worst = np.inf
        for k, p in enumerate(poscars):
            fw = [i for i, s in enumerate(p.get_chemical_symbols()) if s != "Li"]
            dd = get_distances(p.positions[m], p.positions[fw], cell=p.cell, pbc=True)[1]
            worst = min(worst, float(dd.min()))
            if abs(float(dd.min()) - doc["images"][k]["nearest_framework_a"]) > 1e-3:
                check(False, f"image {k}: nearest framework atom {dd.min():.4f} A (ASE) vs "
                             f"{doc['images'][k]['nearest_framework_a']} A (neb.json)")
        check(worst >= CONTACT_A, f"closest approach to the framework {worst:.2f} A "
                                  f"(>= {CONTACT_A} A), ASE and neb.json agree")
        e = [fr.info["bv_energy_ev"] for fr in frames]
        ej = [im["bv_energy_ev"] for im in doc["images"]]
        check(np.allclose(e, ej, atol=1e-4), "energies in images.xyz equal neb.json's")
        check(min(e) >= e[0] - 1e-3 and max(e) == max(e[1:-1]),
              f"the band rises from the ends to a top inside ({max(e) - e[0]:.3f} eV)")

        # populate
        stem = tmp / "fp"
        subprocess.run([args.hopmap, "populate", str(REF / "FePO4_olivine.cif"), "--ion", "Li",
                        "--x", "1", "--out", str(stem), "-q"], check=True,
                       stdout=subprocess.DEVNULL)
        for path, fmt in ((Path(str(stem) + ".cif"), "cif"), (Path(str(stem) + ".vasp"), "vasp")):
            at = read(str(path), format=fmt)
            idx = [i for i, s in enumerate(at.get_chemical_symbols()) if s == "Li"]
            dd = get_distances(at.positions[idx], cell=at.cell, pbc=True)[1]
            dmin = float(dd[~np.eye(len(idx), dtype=bool)].min())
            f = at.get_scaled_positions()[idx]
            off = max(min(frac_dist(ucell, x, y) for y in li) for x in f)
            check(len(idx) == 4 and dmin >= 2.5 and off < 0.3,
                  f"populate {path.suffix}: {len(idx)} Li, closest pair {dmin:.2f} A, at most "
                  f"{off:.2f} A from LiFePO4's M1 sites")
    print(f"check_neb: {'FAILED: ' + str(len(failures)) if failures else 'all passed'}")
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main())

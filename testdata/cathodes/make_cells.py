#!/usr/bin/env python3
"""Writes the small cathode cells of this folder with pymatgen (a general-purpose materials
library on PyPI), as a DFT user would hand them to hopmap: VASP POSCAR files, P 1, no
oxidation states. Run from the repository root:

    python tests/data/cathodes/make_cells.py

- LiCoO2_primitive.vasp: the rhombohedral primitive cell (4 atoms) of
  structures/reference/LiCoO2_layered.cif (Orman & Wiseman, Acta Cryst. C40 (1984) 12), from
  pymatgen's Structure.get_primitive_structure().
- Li0.5CoO2_delithiated.vasp: the conventional hexagonal cell of the same file doubled along a
  (2x1x1, 6 Li), with one Li of each Li layer removed (of the two in each layer of the
  doubled cell, the one further along a): Li3Co6O12 = Li0.5CoO2, the half-charged cathode, atoms not relaxed.
- LiNiO2_primitive.vasp: layered LiNiO2, R-3m (alpha-NaFeO2 type, isostructural with LiCoO2),
  a = 2.878 A, c = 14.19 A, Li 3a (0,0,0), Ni 3b (0,0,1/2), O 6c (0,0,z), z = 0.2415; cell
  and z from memory of the published refinements (e.g. Hirano et al., Solid State Ionics 78
  (1995) 123), written as its primitive cell.
"""

import os

from pymatgen.core import Lattice, Structure
from pymatgen.io.vasp import Poscar

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.dirname(os.path.dirname(os.path.dirname(HERE)))


def write(s, name, comment):
    Poscar(s.get_sorted_structure(), comment=comment).write_file(os.path.join(HERE, name))


licoo2 = Structure.from_file(os.path.join(ROOT, "structures", "reference", "LiCoO2_layered.cif"))
licoo2.remove_oxidation_states()
write(
    licoo2.get_primitive_structure(),
    "LiCoO2_primitive.vasp",
    "LiCoO2 primitive cell from structures/reference/LiCoO2_layered.cif (pymatgen)",
)

half = licoo2.copy()
half.make_supercell([2, 1, 1])
layers = {}
for i, site in enumerate(half):
    if site.specie.symbol == "Li":
        layers.setdefault(round(site.frac_coords[2] % 1.0, 4), []).append(i)
# in each Li layer the two Li of the doubled cell lie half a cell apart along a: drop the one
# further along a
drop = [max(ids, key=lambda i: half[i].frac_coords[0] % 1.0) for ids in layers.values()]
assert len(drop) == 3, drop
half.remove_sites(drop)
write(
    half,
    "Li0.5CoO2_delithiated.vasp",
    "Li0.5CoO2: LiCoO2_layered.cif 2x1x1 with one Li per layer removed (pymatgen)",
)

linio2 = Structure.from_spacegroup(
    "R-3m",
    Lattice.hexagonal(2.878, 14.19),
    ["Li", "Ni", "O"],
    [[0, 0, 0], [0, 0, 0.5], [0, 0, 0.2415]],
)
write(
    linio2.get_primitive_structure(),
    "LiNiO2_primitive.vasp",
    "LiNiO2 R-3m primitive cell, a = 2.878, c = 14.19 A, z(O) = 0.2415 (pymatgen)",
)

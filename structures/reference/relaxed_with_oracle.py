#!/usr/bin/env python3
"""Writes TiNb2O7_block_relaxed.cif: the bundled TiNb2O7 block-oxide model (TiNb2O7_block.cif,
Ti1/3 Nb2/3 on every metal site) ordered and relaxed with a universal machine-learned
interatomic potential, as a stand-in for a DFT-relaxed structure of a real shear oxide.

Steps: the primitive cell of the model (Z = 3, 30 atoms); the Ti/Nb order of lowest Ewald energy
among pymatgen's OrderDisorderedStructureTransformation candidates (formal charges Ti4+, Nb5+,
O2-); then positions and cell relaxed with CHGNet (pretrained weights shipped in the chgnet
package, CPU) to 0.05 eV/A with ASE's FIRE through chgnet's StructOptimizer. The result keeps
the 3 x 3 block topology of TiNb2O7 but its bond lengths and cell are the potential's, not the
bond-valence refinement's: the block-crossing contrast must survive such a structure too.

Run: python structures/reference/relaxed_with_oracle.py   (needs tools/oracle/requirements.txt;
about a minute on one core)
"""

from __future__ import annotations

import os
import warnings

warnings.filterwarnings("ignore")

HERE = os.path.dirname(os.path.abspath(__file__))


def main() -> None:
    import chgnet
    import torch
    from chgnet.model import StructOptimizer
    from pymatgen.core import Structure
    from pymatgen.io.cif import CifWriter
    from pymatgen.transformations.standard_transformations import (
        OrderDisorderedStructureTransformation,
    )

    torch.set_num_threads(1)
    model = Structure.from_file(os.path.join(HERE, "TiNb2O7_block.cif"))
    prim = model.get_primitive_structure()
    ranked = OrderDisorderedStructureTransformation().apply_transformation(
        prim, return_ranked_list=5
    )
    ordered = ranked[0]["structure"]
    ordered.remove_oxidation_states()
    optimizer = StructOptimizer()
    model_version = getattr(optimizer.calculator.model, "version", "unknown")
    result = optimizer.relax(
        ordered, fmax=0.05, steps=400, relax_cell=True, verbose=False
    )
    relaxed = result["final_structure"]
    relaxed.add_oxidation_state_by_element({"Ti": 4, "Nb": 5, "O": -2})
    out = os.path.join(HERE, "TiNb2O7_block_relaxed.cif")
    CifWriter(relaxed, symprec=None).write_file(out)
    header = f"""\
# TiNb2O7, crystallographic-shear (3 x 3)-infinity block oxide, ordered and relaxed.
# Made by structures/reference/relaxed_with_oracle.py from TiNb2O7_block.cif (our bond-valence
# model of the published topology and cell, see its header): primitive cell, Ti/Nb order of
# lowest Ewald energy (pymatgen OrderDisorderedStructureTransformation), positions and cell
# relaxed with CHGNet (pretrained model {model_version}, chgnet package {chgnet.__version__}; a
# universal machine-learned potential, CPU) to 0.05 eV/A.
# Not a published refinement: a stand-in for a relaxed structure of a real shear oxide.
# Oxidation states: Ti4+, Nb5+, O2- (formal).
"""
    with open(out) as f:
        body = f.read()
    with open(out, "w") as f:
        f.write(header + body)
    print(f"wrote {out}: {relaxed.composition}, {relaxed.lattice.abc}")


if __name__ == "__main__":
    main()

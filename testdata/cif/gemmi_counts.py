"""Writes gemmi-counts.tsv: for each structure block of ../shared/cif-corpus, the number of
positions gemmi puts in the full unit cell (one per atom-site label), as an independent oracle
for the hopmap CIF reader (tests/cif_corpus.rs). Run from the crate root:

    python tests/data/cif/gemmi_counts.py

gemmi (PyPI) reads the block with make_small_structure_from_block and expands it with
get_all_unit_cell_sites.
"""
import glob
import os

import gemmi

root = os.path.join(os.path.dirname(__file__), "..", "..", "..", "..", "shared", "cif-corpus")
out = [f"# gemmi {gemmi.__version__}: file<TAB>block<TAB>positions in the cell, per label"]
for path in sorted(glob.glob(os.path.join(root, "inorganic", "*.cif"))):
    try:
        doc = gemmi.cif.read_file(path)
    except Exception:
        continue
    for block in doc:
        if block.find_value("_atom_site_fract_x") is None and not block.find_loop("_atom_site_fract_x"):
            continue
        try:
            st = gemmi.make_small_structure_from_block(block)
            n = len(st.get_all_unit_cell_sites())
        except Exception:
            continue
        if n:
            out.append(f"inorganic/{os.path.basename(path)}\t{block.name}\t{n}")
with open(os.path.join(os.path.dirname(__file__), "gemmi-counts.tsv"), "w") as f:
    f.write("\n".join(out) + "\n")

"""Conversions between pymatgen / ASE objects and the parts the compiled module reads.

pymatgen and ASE are optional: they are imported only when such an object is passed or asked for.
"""

from __future__ import annotations

from typing import Any, List, Tuple

Parts = Tuple[str, List[List[float]], List[str], List[List[float]], List[float]]


def _species_name(symbol: str, oxidation: Any) -> str:
    """`Fe2+`, `O2-`, `Li+`, `Mn3.5+`, or the bare symbol without a state."""
    if oxidation is None or oxidation == 0:
        return symbol
    mag = abs(float(oxidation))
    sign = "-" if oxidation < 0 else "+"
    if abs(mag - 1.0) < 1e-9:
        num = ""
    elif abs(mag - round(mag)) < 1e-9:
        num = str(int(round(mag)))
    else:
        num = f"{mag:.3f}".rstrip("0").rstrip(".")
    return f"{symbol}{num}{sign}"


def is_pymatgen_structure(obj: Any) -> bool:
    return type(obj).__module__.startswith("pymatgen") and hasattr(obj, "lattice") and hasattr(obj, "sites")


def is_ase_atoms(obj: Any) -> bool:
    return type(obj).__module__.startswith("ase") and hasattr(obj, "get_scaled_positions")


def from_pymatgen(structure: Any) -> Parts:
    """Parts of a pymatgen Structure: partial occupancies and oxidation states kept."""
    species, frac, occ = [], [], []
    for site in structure.sites:
        for sp, amount in site.species.items():
            symbol = getattr(sp, "symbol", str(sp))
            species.append(_species_name(symbol, getattr(sp, "oxi_state", None)))
            frac.append([float(x) for x in site.frac_coords])
            occ.append(float(amount))
    name = structure.composition.reduced_formula
    return name, structure.lattice.matrix.tolist(), species, frac, occ


def from_ase(atoms: Any) -> Parts:
    """Parts of an ASE Atoms: a periodic cell is required; charges from `initial_charges` when
    any is set, occupancies from `atoms.info['occupancy']` (ASE's CIF reader) when present."""
    if not all(atoms.pbc) or atoms.cell.rank < 3:
        from .errors import InputError

        raise InputError(
            "ASE Atoms: a periodic cell in three dimensions is needed",
            "input",
            atoms.get_chemical_formula(),
            None,
            "a periodic cell in three dimensions is needed",
        )
    symbols = atoms.get_chemical_symbols()
    charges = atoms.get_initial_charges()
    use_charges = any(abs(q) > 1e-9 for q in charges)
    species = [
        _species_name(s, float(q) if use_charges else None) for s, q in zip(symbols, charges)
    ]
    frac = atoms.get_scaled_positions(wrap=True).tolist()
    occ = [1.0] * len(symbols)
    table = atoms.info.get("occupancy")
    tags = atoms.get_tags()
    if isinstance(table, dict):
        # ASE's CIF reader: occupancy[tag][symbol]; mixed sites appear once per atom
        occ = [float(table.get(str(t), table.get(t, {})).get(s, 1.0)) for t, s in zip(tags, symbols)]
    return atoms.get_chemical_formula(mode="reduce"), atoms.cell[:].tolist(), species, frac, occ


def to_pymatgen(lattice: Any, entries: List[Tuple[str, List[float], float]], energies: List[float]) -> Any:
    """A pymatgen Structure from (species, frac, occupancy) entries, entries at one position
    merged into one disordered site; `energies` (eV, NaN for none) become the site property
    `site_energy_ev`, one per entry (the first entry of a merged site gives it)."""
    from pymatgen.core import Lattice, Structure
    from pymatgen.core.periodic_table import get_el_sp

    merged: list = []
    for (name, f, occ), e in zip(entries, energies):
        sp = get_el_sp(name)
        for m in merged:
            d = [((a - b + 0.5) % 1.0) - 0.5 for a, b in zip(m[1], f)]
            if max(abs(x) for x in d) < 1e-5:
                m[0][sp] = m[0].get(sp, 0.0) + occ
                break
        else:
            merged.append(({sp: occ}, list(f), e))
    return Structure(
        Lattice(lattice),
        [m[0] for m in merged],
        [m[1] for m in merged],
        site_properties={"site_energy_ev": [m[2] for m in merged]},
    )

#!/usr/bin/env python3
"""Cross-checks hopmap's bond-valence sums against pymatgen
(pymatgen.analysis.bond_valence, a general-purpose materials library on PyPI).

For every CIF in structures/reference/ (or the files given), the real binary is run:
`hopmap valence --json FILE` (schema hopmap.valence/1: ions[] with label, site, species,
bvs_vu; pairs[] with pair, r0_a, b_a, cutoff_a). The structure on the pymatgen side comes from
pymatgen's own CIF reader (CifParser, primitive=False), not from hopmap, so the comparison also
covers the expansion of the cell. Per ion (one occupant of one crystallographic site):

- "table, same parameters": hopmap's sum with its normal parameters (valence-resolved IUCr
  table, b = 0.37 A) against the sum s = sum_j occ_j exp((R0 - R_j) / b) computed here over
  pymatgen's neighbour list, with the R0, b and cutoff hopmap reports for each pair.
- "pymatgen parameters": hopmap run again with `--params FILE`, a parameter file written here
  that gives every cation-anion element pair pymatgen's own R0 (the O'Keeffe-Brese element
  estimate from pymatgen's BV_PARAMS, r and c per element) and b = 0.31 A, which is what
  pymatgen uses; against pymatgen's calculate_bv_sum_unordered on the same contacts. (pymatgen
  has no cutoff of its own: it is handed the counter-ions within hopmap's cutoff for the pair.)
  The override run must report exactly those R0 and b, which checks that the file was applied.
- "table vs pymatgen": hopmap's table sum against pymatgen's sum with its own parameters: the
  two parameter sets differ (valence-resolved R0 with b = 0.37 A against an element estimate
  with b = 0.31 A), so this column is printed for information, never a failure.

Contacts are those between ions of opposite sign of oxidation state; each neighbour counts with
its occupancy; a partly occupied or mixed site is compared ion by ion (the sum of one ion on it).
Both same-parameter comparisons must agree within TOLERANCE_VU (hopmap writes bvs_vu to 4
decimals; identical contacts and parameters leave only that rounding).

With --test-json PATH (default target/tmp/bvs_crosscheck.json, written by `cargo test --test
bond_valence`), the library-level sums of that test are compared too when the file exists; the
CLI comparison above does not need it.

Usage: python tools/bvs_crosscheck.py [--hopmap BIN] [FILE.cif ...]
Exit status 1 on a same-parameter disagreement beyond the tolerance or a failed hopmap run,
2 for a usage problem.
"""

import argparse
import json
import math
import os
import re
import subprocess
import sys
import tempfile
import warnings
from pathlib import Path
from types import SimpleNamespace

warnings.filterwarnings("ignore")

from pymatgen.analysis.bond_valence import (  # noqa: E402
    BV_PARAMS,
    calculate_bv_sum,
    calculate_bv_sum_unordered,
)
from pymatgen.core import Element, Lattice, Species, Structure  # noqa: E402
from pymatgen.io.cif import CifParser  # noqa: E402

ROOT = Path(__file__).resolve().parent.parent
TOLERANCE_VU = 0.005  # v.u.
PYMATGEN_B = 0.31  # A, the b of pymatgen's calculate_bv_sum


def pymatgen_r0(cation, anion):
    """pymatgen's R0 for an element pair: the O'Keeffe-Brese estimate from its BV_PARAMS."""
    p1, p2 = BV_PARAMS[Element(cation)], BV_PARAMS[Element(anion)]
    r1, r2, c1, c2 = p1["r"], p2["r"], p1["c"], p2["c"]
    return r1 + r2 - r1 * r2 * (math.sqrt(c1) - math.sqrt(c2)) ** 2 / (c1 * r1 + c2 * r2)


SPECIES_RE = re.compile(r"^([A-Z][a-z]?)(\d+(?:\.\d+)?)?([+-])$")


def parse_species(name):
    """'Mn3.5+' -> ('Mn', 3.5); 'O2-' -> ('O', -2.0); 'Li+' -> ('Li', 1.0)."""
    m = SPECIES_RE.match(name.strip())
    if not m:
        raise ValueError(f"cannot read the species {name!r}")
    mag = float(m.group(2)) if m.group(2) else 1.0
    return m.group(1), mag if m.group(3) == "+" else -mag


def same_species(a, b):
    return a[0] == b[0] and abs(a[1] - b[1]) < 1e-6


def run_valence(binary, path, params=None):
    args = [binary, "valence", "--json", "--quiet"]
    if params:
        args += ["--params", str(params)]
    p = subprocess.run(args + [str(path)], capture_output=True, text=True, timeout=120)
    if p.returncode != 0:
        raise RuntimeError(f"`{' '.join(args)} {path}` exited {p.returncode}: "
                           f"{(p.stderr or p.stdout).strip()}")
    doc = json.loads(p.stdout)
    if doc.get("schema") != "hopmap.valence/1":
        raise RuntimeError(f"{path}: schema {doc.get('schema')!r}, expected hopmap.valence/1")
    return doc


def pair_table(doc):
    """{((cation el, q), (anion el, q)): (r0, b, cutoff)} from hopmap's pairs[]."""
    out = {}
    for p in doc["pairs"]:
        cat, an = re.match(r"^(.+[+-])-(.+[+-])$", p["pair"]).groups()
        out[(parse_species(cat), parse_species(an))] = (p["r0_a"], p["b_a"], p["cutoff_a"])
    return out


def lookup(pairs, centre, other):
    """(r0, b, cutoff) for the contact centre-other (either order), or None."""
    cat, an = (centre, other) if centre[1] > 0 else (other, centre)
    for (c, a), v in pairs.items():
        if same_species(c, cat) and same_species(a, an):
            return v
    return None


def pymatgen_structure(path):
    structs = CifParser(str(path)).parse_structures(primitive=False)
    if len(structs) != 1:
        raise RuntimeError(f"{path}: pymatgen reads {len(structs)} structures, expected 1")
    return structs[0]


def species_key(sp):
    return (sp.symbol, float(sp.oxi_state))


def contacts(struct, k, centre, pairs):
    """Counter-ion contacts of the ion `centre` (el, q) on pymatgen site k within hopmap's
    cutoff for each pair: [(neighbour Species, occupancy, distance, (r0, b))], one entry per
    species of a mixed neighbour site."""
    reach = max(v[2] for v in pairs.values())
    out = []
    for n in struct.get_neighbors(struct[k], reach):
        for sp2, occ2 in n.species.items():
            other = species_key(sp2)
            if centre[1] * other[1] >= 0:
                continue
            p = lookup(pairs, centre, other)
            if p is None:
                raise RuntimeError(f"hopmap lists no pair for {centre}-{other}, yet they are "
                                   f"{n.nn_distance:.3f} A apart")
            if n.nn_distance <= p[2] + 1e-9:
                out.append((sp2, occ2, n.nn_distance, (p[0], p[1])))
    return out


def our_formula(cs):
    return sum(occ * math.exp((r0 - d) / b) for _, occ, d, (r0, b) in cs)


def pymatgen_sum(centre, cs):
    """pymatgen's calculate_bv_sum_unordered for one ion with the given contacts."""
    site = SimpleNamespace(species={Species(centre[0], centre[1]): 1.0})
    nn = [SimpleNamespace(species={sp: occ}, nn_distance=d) for sp, occ, d, _ in cs]
    return abs(calculate_bv_sum_unordered(site, nn))


def write_pymatgen_params(struct, path):
    """A hopmap parameter file giving every cation-anion element pair of `struct` pymatgen's
    R0 and b; returns {(cation, anion): r0}."""
    cations, anions = set(), set()
    for site in struct:
        for sp in site.species:
            (cations if sp.oxi_state > 0 else anions).add(sp.symbol)
    r0s = {}
    lines = ["# pymatgen's bond-valence parameters (O'Keeffe-Brese estimate, b = 0.31 A)\n"]
    for c in sorted(cations):
        for a in sorted(anions):
            r0s[(c, a)] = pymatgen_r0(c, a)
            lines.append(f'[[pair]]\ncation = "{c}"\nanion = "{a}"\nr0 = {r0s[(c, a)]!r}\n'
                         f"b = {PYMATGEN_B}\n")
    Path(path).write_text("\n".join(lines))
    return r0s


def check_file(binary, path, tmpdir):
    """Rows (structure, ion, species, occupancy, hopmap's table sum, the same-parameter sum over
    pymatgen's neighbours, their difference, hopmap with pymatgen's parameters, pymatgen's sum,
    their difference, hopmap's table sum minus pymatgen's) in v.u., and the failures."""
    rows, fails = [], []
    struct = pymatgen_structure(path)
    table = run_valence(binary, path)
    params = Path(tmpdir) / (path.stem + ".toml")
    r0s = write_pymatgen_params(struct, params)
    est = run_valence(binary, path, params)
    table_pairs, est_pairs = pair_table(table), pair_table(est)
    for (cat, an), (r0, b, _) in est_pairs.items():
        want = r0s.get((cat[0], an[0]))
        # hopmap's JSON gives numbers to 6 significant digits: R0 agrees to 1e-5 A
        if want is None or abs(r0 - want) > 1e-5 or abs(b - PYMATGEN_B) > 1e-9:
            fails.append(f"{path.name}: with --params, hopmap uses R0 {r0} A, b {b} A for "
                         f"{cat}-{an}; the file gives {want} and {PYMATGEN_B}")
    est_ions = {i["label"]: i for i in est["ions"]}
    labels = {}
    for i in table["ions"]:
        labels.setdefault(i["site"], set()).add(i["label"])
    for ion in table["ions"]:
        group = labels[ion["site"]]
        ks = [k for k, s in enumerate(struct) if s.label in group]
        if not ks:
            fails.append(f"{path.name}: no pymatgen site labelled {sorted(group)}")
            continue
        k = ks[0]
        centre = parse_species(ion["species"])
        if not any(same_species(species_key(sp), centre) for sp in struct[k].species):
            fails.append(f"{path.name}: pymatgen site {struct[k].label} holds "
                         f"{struct[k].species_string}, not {ion['species']}")
            continue
        ours = abs(ion["bvs_vu"])
        mine = our_formula(contacts(struct, k, centre, table_pairs))
        cs = contacts(struct, k, centre, est_pairs)
        ours_est = abs(est_ions[ion["label"]]["bvs_vu"])
        pm = pymatgen_sum(centre, cs)
        rows.append((path.stem, ion["label"], ion["species"], ion["occupancy"], ours, mine,
                     ours - mine, ours_est, pm, ours_est - pm, ours - pm))
        for what, d in (("table parameters", ours - mine), ("pymatgen parameters", ours_est - pm)):
            if not abs(d) <= TOLERANCE_VU:
                fails.append(f"{path.name} {ion['label']} ({ion['species']}): {what}: hopmap "
                             f"and the same-parameter sum differ by {d:+.4f} v.u.")
    return rows, fails


def print_rows(rows):
    print(f"{'structure':<22}{'ion':<7}{'species':<8}{'occ':>6} | {'hopmap':>8}"
          f"{'same par':>9}{'diff':>9} | {'hopmap':>8}{'pymatgen':>9}{'diff':>9} |"
          f"{'tbl-pmg':>8}")
    print(f"{'':<43} | {'table parameters (v.u.)':^26} | {'pymatgen parameters (v.u.)':^26} |")
    for r in rows:
        print(f"{r[0]:<22}{r[1]:<7}{r[2]:<8}{r[3]:>6.3f} | {r[4]:>8.4f}{r[5]:>9.4f}{r[6]:>+9.4f}"
              f" | {r[7]:>8.4f}{r[8]:>9.4f}{r[9]:>+9.4f} |{r[10]:>+8.3f}")


# ---------------------------------------------------------------------------------------------
# the library-level sums written by crates/hopmap/tests/bond_valence.rs (optional)


def build(entry):
    lattice = Lattice(entry["lattice_rows"])
    species, coords = [], []
    for s in entry["sites"]:
        species.append({Species(o["element"], o["oxidation"]): o["occupancy"]
                        for o in s["occupants"]})
        coords.append(s["frac"])
    return Structure(lattice, species, coords)


def check_test_json(path):
    """Worst |diff| of the test artefact's 'estimate_b031' mode against calculate_bv_sum(_unordered)
    and of its table mode against the same-parameter sum over pymatgen's neighbours."""
    data = json.loads(Path(path).read_text())
    worst_same, worst_table = 0.0, 0.0
    for entry in data:
        st = build(entry)
        for mode in ("estimate_b031", "table"):
            ours = {i["label"]: abs(i["bvs"]) for i in entry["modes"][mode]["ions"]}
            params = {(p["cation"], p["anion"]): p for p in entry["modes"][mode]["pairs"]}
            maxcut = max(p["cutoff_a"] for p in params.values())
            for k, s in enumerate(entry["sites"]):
                if not s["representative"]:
                    continue
                for o in s["occupants"]:
                    q1 = o["oxidation"]
                    nn = []
                    for n in st.get_neighbors(st[k], maxcut):
                        for sp2, occ2 in n.species.items():
                            if q1 * sp2.oxi_state >= 0:
                                continue
                            key = (o["element"], sp2.symbol) if q1 > 0 else (sp2.symbol,
                                                                               o["element"])
                            p = params.get(key)
                            if p and n.nn_distance <= p["cutoff_a"] + 1e-9:
                                nn.append((sp2, occ2, n.nn_distance, (p["r0"], p["b"])))
                    us = ours[o["label"]]
                    if mode == "estimate_b031":
                        site = SimpleNamespace(species={Species(o["element"], q1): 1.0})
                        if all(occ == 1.0 for _, occ, _, _ in nn):
                            ordered = SimpleNamespace(specie=Species(o["element"], q1))
                            pm = abs(calculate_bv_sum(ordered, [
                                SimpleNamespace(specie=sp, nn_distance=d) for sp, _, d, _ in nn]))
                        else:
                            pm = abs(calculate_bv_sum_unordered(site, [
                                SimpleNamespace(species={sp: occ}, nn_distance=d)
                                for sp, occ, d, _ in nn]))
                        worst_same = max(worst_same, abs(us - pm))
                    else:
                        worst_table = max(worst_table, abs(us - our_formula(nn)))
    return worst_same, worst_table


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0],
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--hopmap", default=os.environ.get("HOPMAP_BIN",
                                                       str(ROOT / "target/release/hopmap")))
    ap.add_argument("files", nargs="*", type=Path,
                    help="CIF files (default: structures/reference/*.cif)")
    ap.add_argument("--test-json", type=Path, default=ROOT / "target/tmp/bvs_crosscheck.json",
                    help="library-level sums written by `cargo test --test bond_valence`, "
                         "compared too when the file exists")
    args = ap.parse_args(argv)
    if not Path(args.hopmap).exists():
        print(f"bvs_crosscheck: hopmap binary {args.hopmap} not found (cargo build --release, "
              f"or --hopmap / HOPMAP_BIN)", file=sys.stderr)
        return 2
    files = args.files or sorted((ROOT / "structures" / "reference").glob("*.cif"))
    if not files:
        print("bvs_crosscheck: no CIF files", file=sys.stderr)
        return 2
    rows, fails = [], []
    with tempfile.TemporaryDirectory(prefix="bvs-crosscheck-") as tmp:
        for f in files:
            try:
                r, fl = check_file(args.hopmap, f, tmp)
            except Exception as e:  # noqa: BLE001 - a file that cannot be compared fails
                r, fl = [], [f"{f.name}: {type(e).__name__}: {e}"]
            rows += r
            fails += fl
    print_rows(rows)
    worst_t = max((abs(r[6]) for r in rows), default=float("nan"))
    worst_p = max((abs(r[9]) for r in rows), default=float("nan"))
    print(f"{len(rows)} ions in {len(files)} structures, hopmap = {args.hopmap}")
    print(f"table parameters (hopmap's R0, b, cutoff) on pymatgen's neighbours: worst |diff| "
          f"{worst_t:.1e} v.u.")
    print(f"pymatgen's parameters (O'Keeffe-Brese estimate, b = {PYMATGEN_B} A) through "
          f"`hopmap valence --params`, against calculate_bv_sum_unordered: worst |diff| "
          f"{worst_p:.1e} v.u.")
    print(f"tolerance {TOLERANCE_VU} v.u. for both; the tbl-pmg column (different parameter "
          f"sets) is information only")
    if args.test_json.exists():
        same, tbl = check_test_json(args.test_json)
        print(f"library sums from {args.test_json}: pymatgen parameters worst |diff| {same:.1e}"
              f" v.u., table parameters worst |diff| {tbl:.1e} v.u.")
        if same > TOLERANCE_VU or tbl > TOLERANCE_VU:
            fails.append(f"{args.test_json}: library-level sums differ by more than "
                         f"{TOLERANCE_VU} v.u. (pymatgen {same:.2e}, table {tbl:.2e})")
    else:
        print(f"note: {args.test_json} not found (written by `cargo test --test bond_valence`);"
              f" library-level comparison skipped")
    for f in fails:
        print("FAIL " + f)
    return 1 if fails else 0


if __name__ == "__main__":
    sys.exit(main())

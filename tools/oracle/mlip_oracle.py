#!/usr/bin/env python3
"""Independent physics oracle for hopmap: a universal machine-learned interatomic potential.

CHGNet (Deng et al., Nat. Mach. Intell. 5 (2023) 1031; pretrained weights ship inside the
`chgnet` PyPI package) driven by ASE: relaxations and climbing-image NEB (Henkelman, Uberuaga &
Jonsson, J. Chem. Phys. 113 (2000) 9901) on CPU, one thread. A development and CI tool only:
the product never imports it.

Subcommands (see tools/oracle/README.md):
  neb FILE --ion Li      oracle barrier of the rate-limiting pass of hopmap's lowest channel
  sites FILE --ion Li    is hopmap's lowest site the real lowest site?
  relax FILE             relax positions and cell, report displacements and volume change
  run-set                neb + sites for every row of a references table, into a CSV
  ci                     a small, fast NEB compared with the stored value in results.csv
  direction FILE --ion Li --site x,y,z --along u,v,w [--along ...]
                         one interstitial ion from a site to its image along each lattice
                         vector: which direction is the easy one (into directions.csv)

Energies in eV, distances in angstrom, forces in eV/A, times in seconds.
"""

from __future__ import annotations

import os

# One thread: the machine is shared. Must be set before torch is imported.
for _v in ("OMP_NUM_THREADS", "MKL_NUM_THREADS", "OPENBLAS_NUM_THREADS"):
    os.environ.setdefault(_v, "1")

import argparse
import csv
import datetime
import io
import itertools
import json
import math
import subprocess
import sys
import tempfile
import time
import warnings
from contextlib import redirect_stdout
from dataclasses import dataclass, field
from importlib.metadata import version as pkg_version
from pathlib import Path

import numpy as np

warnings.filterwarnings("ignore")

HERE = Path(__file__).resolve().parent
REPO = HERE.parent.parent
DEFAULT_RESULTS = HERE / "results.csv"
DEFAULT_REFS = REPO / "structures" / "reference" / "references.csv"
DEFAULT_DIRECTIONS = HERE / "directions.csv"

MIN_IMAGE_A = 8.0  # periodic images of the moving ion at least this far apart
MAX_ATOMS = 200  # above this an ordered supercell is not attempted
RELAX_FMAX = 0.05  # eV/A, end points and sites
NEB_FMAX = 0.1  # eV/A
NEB_STEPS = 300
RELAX_STEPS = 500
SITE_WINDOW_EV = 1.0  # hopmap orbits within this of the lowest are tried by `sites`
MAX_ORBITS = 3
KICK_A = 0.05  # end-point ion displaced along the path, away from the saddle, before relaxing
RATTLE_A = 0.02  # rattle of the perfect crystal before relaxing it (site check)
ON_SITE_A = 0.6  # a hopmap site this close to an ion of the file is that ion's site
ON_PATH_A = 0.5  # a path point this close to an ion site passes through it
NEAREST_TOL_A = 0.15  # a pair of ion sites this much above the shortest distance is still nearest
MAX_CHAIN = 3  # network hops in one nearest-neighbour hop (up to two intermediate minima)
FLAT_EV = 0.005  # a band whose highest image is within this of an end has no barrier
CI_FILE = "TiO2_rutile.cif"
CI_ION = "Li"
CI_TOL_EV = 0.02  # barrier (the c channel of rutile is nearly flat under the model)
CI_ENERGY_TOL_EV = 0.005  # relaxed end-point total energy

CSV_COLUMNS = [
    "file", "ion", "mode", "pass", "supercell", "atoms", "images", "barrier_ev",
    "start_energy_ev", "end_energy_ev", "end_minus_start_ev", "max_force_ev_a", "converged",
    "neb_steps", "hop_kind", "hop_length_a", "hopmap_hop_barrier_ev", "hopmap_barrier_ev",
    "hopmap_pass_barrier_ev", "hopmap_dimension",
    "lowest_site_verdict", "site_energies", "ordering", "model", "ase_version", "date",
    "wall_s", "notes",
]


DIRECTION_COLUMNS = [
    "file", "ion", "site_frac", "along", "hop_length_a", "supercell", "atoms", "images",
    "barrier_ev", "end_moved_a", "max_force_ev_a", "converged", "neb_steps", "profile_ev",
    "model", "ase_version", "date", "wall_s", "notes",
]


class OracleError(Exception):
    """A failure with a plain sentence naming the file."""


# ----------------------------------------------------------------------------------------------
# model


_MODEL = None


def model():
    global _MODEL
    if _MODEL is None:
        import torch

        torch.set_num_threads(1)
        try:
            torch.set_num_interop_threads(1)
        except RuntimeError:
            pass
        from chgnet.model import CHGNet

        with redirect_stdout(io.StringIO()):
            _MODEL = CHGNet.load(use_device="cpu", verbose=False)
    return _MODEL


_CALCS = {}
STATS = {"calls": 0, "seconds": 0.0}  # model evaluations and the time spent in them


def calculator(with_stress=False):
    """One calculator per kind for relaxations (NEB images get their own)."""
    if with_stress not in _CALCS:
        _CALCS[with_stress] = _new_calculator(with_stress)
    return _CALCS[with_stress]


def _new_calculator(with_stress):
    from chgnet.model.dynamics import CHGNetCalculator

    class _Calc(CHGNetCalculator):
        # fixed-cell work needs no stress: skip it ("ef"), about a third cheaper
        def calculate(self, atoms=None, properties=None, system_changes=None, task=None):
            t = time.time()
            super().calculate(atoms, properties, system_changes,
                              task="efsm" if with_stress else "ef")
            STATS["calls"] += 1
            STATS["seconds"] += time.time() - t
            self.results.setdefault("magmoms", np.zeros(len(atoms)))

    with redirect_stdout(io.StringIO()):
        c = _Calc(model=model(), use_device="cpu")
    if not with_stress:
        c.implemented_properties = ["energy", "free_energy", "forces"]
    return c


def model_name():
    return f"CHGNet {model().version} via chgnet {pkg_version('chgnet')}"


def versions():
    import ase
    import torch

    return {
        "model": model_name(),
        "ase": ase.__version__,
        "torch": torch.__version__,
        "pymatgen": pkg_version("pymatgen"),
    }


# ----------------------------------------------------------------------------------------------
# structures


def load_structure(path: Path):
    from pymatgen.core import Structure

    if not path.exists():
        raise OracleError(f"{path}: no such file")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            s = Structure.from_file(str(path))
        except Exception as e:  # pymatgen raises many kinds
            raise OracleError(f"{path}: pymatgen could not read it: {e}") from e
    return s


def site_elements(site):
    """Element symbol -> occupancy (oxidation states merged: Mn3+/Mn4+ is all Mn)."""
    occ = {}
    for sp, x in site.species.items():
        el = sp.symbol if hasattr(sp, "symbol") else str(sp)
        occ[el] = occ.get(el, 0.0) + float(x)
    return occ


def lattice_min_image(matrix: np.ndarray, reach=3) -> float:
    """Shortest non-zero lattice vector (A)."""
    best = math.inf
    r = range(-reach, reach + 1)
    for i, j, k in itertools.product(r, r, r):
        if i == j == k == 0:
            continue
        best = min(best, float(np.linalg.norm(i * matrix[0] + j * matrix[1] + k * matrix[2])))
    return best


@dataclass
class Ordered:
    atoms: object  # ase.Atoms, ordered supercell
    mult: tuple  # diagonal supercell of the file's cell
    note: str  # how partial occupancies were ordered ("" when none)
    unit_matrix: np.ndarray  # the file's cell (rows a, b, c in A)


def _groups(struct):
    """Disordered sites grouped by their (element -> occupancy) content."""
    groups = {}
    for i, site in enumerate(struct):
        occ = site_elements(site)
        if len(occ) == 1 and abs(sum(occ.values()) - 1.0) < 1e-3:
            continue
        key = tuple(sorted((el, round(x, 4)) for el, x in occ.items()))
        groups.setdefault(key, []).append(i)
    return groups


def choose_supercell(struct, min_image=MIN_IMAGE_A, max_atoms=MAX_ATOMS):
    """Smallest diagonal supercell with images >= min_image whose partial occupancies give whole
    atom counts. Returns (mult, exact) where exact=False means no such cell up to max_atoms and
    the counts will be rounded in the smallest cell that satisfies min_image."""
    m = struct.lattice.matrix
    groups = _groups(struct)

    def n_atoms(mult):
        cells = mult[0] * mult[1] * mult[2]
        total = 0.0
        for site in struct:
            total += sum(site_elements(site).values())
        return total * cells

    def integer(mult):
        cells = mult[0] * mult[1] * mult[2]
        for key, idx in groups.items():
            for _, x in key:
                c = x * len(idx) * cells
                if abs(c - round(c)) > 0.05:
                    return False
        return True

    cands = []
    for mult in itertools.product(range(1, 9), repeat=3):
        sm = m * np.array(mult)[:, None]
        if lattice_min_image(sm) < min_image - 1e-6:
            continue
        cands.append((n_atoms(mult), sum(mult), mult))
    if not cands:
        raise OracleError("no supercell up to 8x8x8 reaches the image distance")
    cands.sort()
    smallest = cands[0][2]
    for n, _, mult in cands:
        if n > max_atoms + 0.5:
            break
        if integer(mult):
            return mult, True
    return smallest, False


def order_structure(struct, min_image=MIN_IMAGE_A, max_atoms=MAX_ATOMS, rounding=True):
    """Ordered ase.Atoms supercell of a (possibly disordered) pymatgen Structure.

    Ordering rule (deterministic): within each group of sites that share one partial content,
    the species counts are occupancy x sites (rounded to whole atoms); species are placed from
    the rarest up, each new atom on the remaining site farthest (periodic distance) from the
    atoms of that species already placed, starting at the lowest site index; vacancies count
    as a species. The most abundant species takes the rest.
    """
    from ase import Atoms

    mult, exact = choose_supercell(struct, min_image, max_atoms)
    groups = _groups(struct)
    if not exact and not rounding:
        raise OracleError("partial occupancies need a supercell over "
                          f"{max_atoms} atoms to become whole")
    sc = struct.copy()
    sc.make_supercell(list(mult))
    lat = sc.lattice
    notes = []
    symbols = [None] * len(sc)
    sgroups = _groups(sc)
    for i, site in enumerate(sc):
        occ = site_elements(site)
        if len(occ) == 1 and abs(sum(occ.values()) - 1.0) < 1e-3:
            symbols[i] = next(iter(occ))
    for key, idx in sgroups.items():
        n = len(idx)
        want = {el: x * n for el, x in key}
        vac = n - sum(want.values())
        if vac > 0.05:
            want[""] = vac
        # largest-remainder rounding keeps the total at n
        floor = {el: int(math.floor(c + 1e-6)) for el, c in want.items()}
        left = n - sum(floor.values())
        for el in sorted(want, key=lambda e: -(want[e] - floor[e]))[:left]:
            floor[el] += 1
        rounded = any(abs(want[el] - floor[el]) > 0.05 for el in want)
        content = ", ".join(f"{el or 'vacancy'} {x:g}" for el, x in key)
        counts = ", ".join(f"{el or 'vacancy'} {floor[el]}" for el in sorted(floor))
        notes.append(f"{n} sites of ({content}): {counts}"
                     + (" (rounded: occupancies not whole in any cell up to "
                        f"{max_atoms} atoms)" if rounded else ""))
        fc = np.array([sc[i].frac_coords for i in idx])
        dist = lat.get_all_distances(fc, fc)
        free = list(range(n))
        for el in sorted(floor, key=lambda e: (floor[e], e))[:-1]:
            placed = []
            for _ in range(floor[el]):
                if not placed:
                    pick = free[0]
                else:
                    dmin = dist[np.ix_(free, placed)].min(axis=1)
                    pick = free[int(np.argmax(dmin - 1e-9 * np.arange(len(free))))]
                placed.append(pick)
                free.remove(pick)
            for p in placed:
                symbols[idx[p]] = el
        last = sorted(floor, key=lambda e: (floor[e], e))[-1]
        for p in free:
            symbols[idx[p]] = last
    keep = [i for i, s in enumerate(symbols) if s]
    atoms = Atoms(
        symbols=[symbols[i] for i in keep],
        positions=np.array([sc[i].coords for i in keep]),
        cell=lat.matrix,
        pbc=True,
    )
    note = ("ordered by farthest-point placement: " + "; ".join(notes)) if notes else ""
    return Ordered(atoms, tuple(mult), note, struct.lattice.matrix.copy())


# ----------------------------------------------------------------------------------------------
# hopmap


def hopmap_bin(arg):
    cands = [arg, os.environ.get("HOPMAP_BIN"), str(REPO / "target" / "release" / "hopmap")]
    for c in cands:
        if c and Path(c).exists():
            return c
    raise OracleError("hopmap binary not found: build it (cargo build --release) or pass --hopmap")


def run_hopmap(binary, path: Path, ion: str):
    p = subprocess.run([binary, "paths", str(path), "--ion", ion, "--json", "--quiet"],
                       capture_output=True, text=True)
    if p.returncode != 0:
        raise OracleError(f"{path}: hopmap paths failed: {p.stderr.strip()}")
    return json.loads(p.stdout)


def ion_positions(struct, ion, majority=False):
    """Cartesian positions of every site of the file that holds the ion (any occupancy; with
    `majority`, only sites where the ion is the main occupant, so that Li on a Ti site of
    Li4Ti5O12 does not count)."""
    out = []
    for s in struct:
        occ = site_elements(s)
        if ion in occ and (not majority or occ[ion] >= max(occ.values()) - 1e-9):
            out.append(s.coords)
    return np.array(out).reshape(-1, 3)


def min_image_dist(cart_a, cart_b, matrix):
    """Distance between two Cartesian points under the periodic lattice `matrix`."""
    inv = np.linalg.inv(matrix)
    d = (np.asarray(cart_a) - np.asarray(cart_b)) @ inv
    d -= np.round(d)
    best = math.inf
    for sh in itertools.product((-1, 0, 1), repeat=3):
        best = min(best, float(np.linalg.norm((d + sh) @ matrix)))
    return best


@dataclass
class Pass:
    dimension: int
    hopmap_barrier_ev: float
    hopmap_pass_barrier_ev: float
    start_frac: np.ndarray  # unit-cell fractional, unwrapped along the path
    end_frac: np.ndarray
    path_frac: np.ndarray  # points from start to end, unwrapped
    description: str
    start_orbit: int | None
    end_orbit: int | None
    kind: str = "lowest pass"  # "lowest pass", "nearest hop" or "channel repeat"
    hop_barrier_ev: float | None = None  # hopmap's barrier of this very hop (see hop_barrier)
    length_a: float = 0.0  # end to end, A
    network_hops: list = field(default_factory=list)  # indices into paths --json hops[]
    start_d: float = -1.0  # distance of the start along the channel profile (A), lowest pass
    chain: int = 1  # network hops between the ends
    why: str = ""  # why this kind was chosen


def nearest_site(doc, frac, matrix):
    best, bi = math.inf, None
    c = np.asarray(frac) @ matrix
    for s in doc["sites"]:
        d = min_image_dist(c, np.asarray(s["frac"]) @ matrix, matrix)
        if d < best:
            best, bi = d, s
    return bi, best


def lowest_profile(doc, ion):
    """hopmap's lowest channel (`channels[]` of `paths --json`) and its profile over one repeat:
    (channel, profile, translation (fractional), repeat length (A), distances (A), energies
    (eV), fractional positions of the path points)."""
    chans = doc.get("channels") or []
    if not chans:
        raise OracleError(f"{doc['file']}: hopmap finds no channel for {ion}")
    ch = min(chans, key=lambda c: (c["threshold_ev"], c["dimension"]))
    prof = next((p for p in doc["profiles"] if p["dimension"] == ch["dimension"]), None)
    if prof is None:
        raise OracleError(f"{doc['file']}: no profile for the {ch['dimension']}D channel")
    T = np.array(prof["translation"], float)
    d = np.array([p[0] for p in prof["points"]])
    e = np.array([p[1] for p in prof["points"]])
    f = np.array(prof["points_frac"], float)
    return ch, prof, T, prof["length_a"], d, e, f


def choose_pass(doc, struct, ion, vacancy: bool) -> Pass:
    """The rate-limiting pass of hopmap's lowest channel: the highest saddle of the channel's
    profile and the nearest minima on both sides that qualify as end points (vacancy mode: on
    an ion site of the file; interstitial mode: not a shallow minimum)."""
    ch, prof, T, L, pts_d, pts_e, pts_f = lowest_profile(doc, ion)
    m = struct.lattice.matrix
    # three repeats so that end points may lie across the repeat boundary
    ext_d, ext_f, ext_e = [], [], []
    for k in (-1, 0, 1):
        sl = slice(1, None) if k > -1 else slice(None)
        ext_d.append(pts_d[sl] + k * L)
        ext_f.append(pts_f[sl] + k * T)
        ext_e.append(pts_e[sl])
    ext_d, ext_f, ext_e = np.concatenate(ext_d), np.concatenate(ext_f), np.concatenate(ext_e)
    sites = []
    for k in (-1, 0, 1):
        for s in prof["sites"]:
            d = s["distance_a"] + k * L
            if any(abs(d - x["d"]) < 1e-3 for x in sites):
                continue
            sites.append({"d": d, "e": s["energy_ev"], "frac": np.array(s["frac"]) + k * T})
    sites.sort(key=lambda x: x["d"])
    sad = max(prof["saddles"], key=lambda s: (s["energy_ev"], -s["distance_a"]))
    ds = sad["distance_a"]
    ion_c = ion_positions(struct, ion, majority=True)
    inv = np.linalg.inv(m)

    def info(s):
        hs, _ = nearest_site(doc, s["frac"], m)
        return hs

    def ion_site_image(frac):
        """Fractional position (the image nearest to `frac`) of the ion site within
        ON_PATH_A of it, or None."""
        c = np.asarray(frac) @ m
        for x in ion_c:
            if min_image_dist(c, x, m) < ON_PATH_A:
                d = x @ inv - frac
                return frac + (d - np.round(d))
        return None

    if vacancy:
        # walk along the path points from the saddle to the first point on an ion site of the
        # file on each side (two different sites): the moving ion's start and end
        isad = int(np.argmin(np.abs(ext_d - ds)))
        fa = fb = None
        for j in range(isad, -1, -1):
            fa = ion_site_image(ext_f[j])
            if fa is not None:
                ja = j
                break
        for j in range(isad, len(ext_d)):
            f = ion_site_image(ext_f[j])
            if f is not None and (fa is None or np.linalg.norm((f - fa) @ m) > 0.5):
                fb, jb = f, j
                break
        if fa is None or fb is None:
            raise OracleError(f"{doc['file']}: the path around the highest saddle does not "
                              f"pass two sites of {ion}")
        a = {"d": ext_d[ja], "e": ext_e[ja], "frac": fa}
        b = {"d": ext_d[jb], "e": ext_e[jb], "frac": fb}
        path = np.vstack([fa, ext_f[ja + 1:jb], fb])
        ha, hb = info(a), info(b)
    else:
        def ok(s):
            hs = info(s)
            return hs is None or not hs.get("shallow", False)

        left = [s for s in sites if s["d"] < ds - 1e-6][::-1]
        right = [s for s in sites if s["d"] > ds + 1e-6]
        a = next((s for s in left if ok(s)), None)
        b = next((s for s in right if ok(s)), None)
        if a is None or b is None:
            raise OracleError(f"{doc['file']}: no qualifying end points around the highest "
                              "saddle")
        sel = (ext_d > a["d"] + 1e-6) & (ext_d < b["d"] - 1e-6)
        ha, hb = info(a), info(b)

        # end points: hopmap's refined minimum (the image nearest to the profile's point)
        def snap(s, hs):
            d = np.array(hs["frac"]) - s["frac"]
            return s["frac"] + (d - np.round(d))

        fa, fb = snap(a, ha), snap(b, hb)
        path = np.vstack([fa, ext_f[sel], fb])
    inner = [s for s in sites if a["d"] < s["d"] < b["d"]]
    seg = (ext_d >= a["d"] - 1e-6) & (ext_d <= b["d"] + 1e-6)
    # the lowest point of the pass: its path points and the hopmap minima at its two ends
    e_lo = float(ext_e[seg].min())
    for hs, f in ((ha, fa), (hb, fb)):
        if hs is not None and min_image_dist(np.asarray(hs["frac"]) @ m, f @ m, m) < ON_SITE_A:
            e_lo = min(e_lo, hs["energy_ev"])

    def lab(hs):
        if hs is None:
            return "?"
        return f"orbit {hs['orbit']}" + (f" ({hs['label']})" if hs.get("label") else "")

    desc = (f"{ch['dimension']}D channel, saddle at {sad['distance_a']:.2f} A of a "
            f"{L:.2f} A repeat ({sad['energy_ev']:.3f} eV); {lab(ha)} -> {lab(hb)}, "
            f"{np.linalg.norm((fb - fa) @ m):.2f} A apart"
            + (f", through {len(inner)} intermediate minim{'a' if len(inner) != 1 else 'um'}"
               if inner else ""))
    return Pass(ch["dimension"], ch["barrier_ev"], sad["energy_ev"] - e_lo, fa, fb, path, desc,
                ha["orbit"] if ha else None, hb["orbit"] if hb else None,
                hop_barrier_ev=sad["energy_ev"] - e_lo,
                length_a=float(np.linalg.norm((fb - fa) @ m)), start_d=float(a["d"]),
                chain=len(inner) + 1)


def shortest_ion_distance(ion_c, matrix):
    """Shortest distance (A) between two sites of the ion in the periodic crystal (a site and
    its own image count), from Cartesian positions in the cell `matrix`."""
    best = lattice_min_image(matrix)
    for i in range(len(ion_c)):
        for j in range(i + 1, len(ion_c)):
            best = min(best, min_image_dist(ion_c[i], ion_c[j], matrix))
    return best


def nearest_hop(doc, struct, ion):
    """hopmap's easiest hop between two nearest sites of the ion (vacancy mode).

    Walks hopmap's site network (`hops[]` of `paths --json`) from each site on an ion site of
    the file, through empty minima only (at most MAX_CHAIN network hops), to another site on an
    ion site of the file whose distance is the shortest ion-ion distance (within
    NEAREST_TOL_A). Of those chains the one with the lowest highest saddle is the hop; its
    barrier is that saddle minus the lower of its two end sites (eV), the number paired with
    the oracle's barrier from the lower relaxed end. The path handed to the NEB runs through
    the ion sites at the ends and hopmap's saddles and intermediate minima in between
    (fractional coordinates of the file's cell, unwrapped). Returns None when no such chain.
    """
    m = struct.lattice.matrix
    inv = np.linalg.inv(m)
    ion_c = ion_positions(struct, ion, majority=True)
    if len(ion_c) == 0:
        return None
    d_min = shortest_ion_distance(ion_c, m)
    sites = {s["index"]: s for s in doc["sites"]}

    def ion_image(frac):
        c = np.asarray(frac) @ m
        for x in ion_c:
            if min_image_dist(c, x, m) < ON_SITE_A:
                d = x @ inv - np.asarray(frac)
                return np.asarray(frac) + (d - np.round(d))
        return None

    on_ion = {k: ion_image(s["frac"]) for k, s in sites.items()}
    # out-going edges: (to, image, saddle frac relative to the from site's cell, saddle eV, hop)
    edges = {k: [] for k in sites}
    for n, h in enumerate(doc.get("hops") or []):
        u, v, t = h["from"], h["to"], np.array(h["image"], float)
        fu, fv = np.array(sites[u]["frac"]), np.array(sites[v]["frac"]) + t
        sf = np.array(h["saddle_frac"], float)
        sf = sf + np.round(0.5 * (fu + fv) - sf)
        edges[u].append((v, t, sf, h["saddle_ev"], n))
        edges[v].append((u, -t, sf - t, h["saddle_ev"], n))
    best = None
    seen_orbits = set()
    for k, s in sorted(sites.items()):
        if on_ion[k] is None or s["orbit"] in seen_orbits:
            continue
        seen_orbits.add(s["orbit"])
        start = on_ion[k]
        # depth-first over chains of hops through empty minima
        stack = [(k, np.zeros(3), [start], -math.inf, [], {(k, (0, 0, 0))})]
        while stack:
            u, off, pts, top, used, visited = stack.pop()
            for v, t, sf, e_sad, n in edges[u]:
                o2 = off + t
                key = (v, tuple(int(x) for x in np.round(o2)))
                if key in visited:
                    continue
                top2 = max(top, e_sad)
                fv = np.array(sites[v]["frac"]) + o2
                if on_ion[v] is not None:
                    end = on_ion[v] + o2
                    dist = float(np.linalg.norm((end - start) @ m))
                    if dist < 0.3 or dist > d_min + NEAREST_TOL_A:
                        continue
                    e_lo = min(s["energy_ev"], sites[v]["energy_ev"])
                    path = np.vstack(pts + [sf + off, end])
                    arc = float(np.linalg.norm(np.diff(path @ m, axis=0), axis=1).sum())
                    cand = (top2 - e_lo, len(used) + 1, arc)
                    if best is None or cand < best[0]:
                        best = (cand, k, v, path, used + [n], dist)
                elif len(used) + 1 < MAX_CHAIN:
                    stack.append((v, o2, pts + [sf + off, fv], top2, used + [n],
                                  visited | {key}))
    if best is None:
        return None
    (barrier, nchain, _), k, v, path, used, dist = best
    sa, sb = sites[k], sites[v]

    def lab(x):
        return f"orbit {x['orbit']}" + (f" ({x['label']})" if x.get("label") else "")

    desc = (f"nearest hop: {lab(sa)} -> {lab(sb)}, {dist:.2f} A apart (shortest {ion}-{ion} "
            f"distance {d_min:.2f} A), over {nchain} network hop{'s' if nchain > 1 else ''} "
            f"(hops[] {', '.join(map(str, used))})")
    ch = min(doc["channels"], key=lambda c: (c["threshold_ev"], c["dimension"]))
    return Pass(ch["dimension"], ch["barrier_ev"], barrier, path[0], path[-1], path, desc,
                sa["orbit"], sb["orbit"], kind="nearest hop", hop_barrier_ev=barrier,
                length_a=dist, network_hops=used, chain=nchain,
                why=f"shortest {ion}-{ion} distance {d_min:.2f} A")


def repeat_pass(doc, struct, ps: Pass | None) -> Pass:
    """Interstitial mode: from the pass's start minimum to the same minimum one repeat of the
    channel away, along hopmap's lowest path (the whole repeat, every saddle of it). hopmap's
    barrier of it: the highest point of the repeat minus its lowest (eV)."""
    ch, _prof, T, L, d, e, f = lowest_profile(doc, doc.get("ion", {}).get("element", "the ion"))
    m = struct.lattice.matrix
    ext_d = np.concatenate([d, d[1:] + L, d[1:] + 2 * L])
    ext_e = np.concatenate([e, e[1:], e[1:]])
    ext_f = np.concatenate([f, f[1:] + T, f[1:] + 2 * T])
    if ps is not None and ps.start_d >= 0:
        d0 = ps.start_d
        # the start point as a position on the first repeat of the extended path
        while d0 >= L:
            d0 -= L
        j0 = int(np.argmin(np.abs(ext_d - d0)))
        fa = ps.start_frac
    else:
        # no usable pass: start at the lowest point of the profile
        j0 = int(np.argmin(e))
        d0, fa = float(d[j0]), f[j0]
    sel = (ext_d > d0 + 1e-6) & (ext_d < d0 + L - 1e-6)
    shift = ext_f[j0] - fa
    path = np.vstack([fa, ext_f[sel] - shift, fa + T])
    seg = (ext_d >= d0 - 1e-6) & (ext_d <= d0 + L + 1e-6)
    barrier = float(ext_e[seg].max() - ext_e[seg].min())
    desc = (f"channel repeat: {ch['dimension']}D channel, from the start minimum of the lowest "
            f"pass to its image one repeat away, {float(np.linalg.norm(T @ m)):.2f} A apart")
    orbit = ps.start_orbit if ps is not None else None
    return Pass(ch["dimension"], ch["barrier_ev"], barrier, fa, fa + T, path,
                desc, orbit, orbit, kind="channel repeat",
                hop_barrier_ev=barrier, length_a=float(np.linalg.norm(T @ m)),
                why="the ends of the lowest pass relax into one well")


def choose_hop(doc, struct, ion, vacancy: bool, hop_mode="auto") -> Pass:
    """The hop the oracle runs. `hop_mode`: "pass" (the lowest pass, see choose_pass),
    "nearest" (nearest_hop), "repeat" (interstitial: repeat_pass) or "auto": in vacancy mode
    the nearest hop when the lowest pass joins sites farther apart than the shortest ion-ion
    distance, so that it spans more than one vacancy hop (or when it cannot be set up at all),
    else the lowest pass, whose ends are then a nearest pair; in interstitial mode the lowest
    pass (run_neb turns to the channel repeat when its ends relax into one well)."""
    ps, err = None, None
    try:
        ps = choose_pass(doc, struct, ion, vacancy)
    except OracleError as e:
        err = e
    if hop_mode == "repeat" or (not vacancy and hop_mode == "auto" and ps is None):
        rp = repeat_pass(doc, struct, ps)
        if hop_mode == "repeat":
            rp.why = "asked for"
        elif ps is None:
            rp.why = f"the lowest pass could not be set up ({err})"
        return rp
    if not vacancy or hop_mode == "pass":
        if ps is None:
            raise err
        ps.why = "interstitial mode" if not vacancy else "asked for"
        return ps
    ion_c = ion_positions(struct, ion, majority=True)
    d_min = shortest_ion_distance(ion_c, struct.lattice.matrix)
    if hop_mode == "auto" and ps is not None and ps.length_a <= d_min + NEAREST_TOL_A:
        ps.why = (f"its ends are a nearest pair ({ps.length_a:.2f} A; shortest {ion}-{ion} "
                  f"distance {d_min:.2f} A)")
        return ps
    nn = nearest_hop(doc, struct, ion)
    if nn is None:
        if ps is None:
            raise OracleError(f"{err}; and no chain of hops joins two nearest sites of {ion}")
        ps.why = "no chain of hops joins two nearest sites of the ion"
        return ps
    if ps is None:
        nn.why += f"; the lowest pass could not be set up ({err})"
    else:
        nn.why += f"; the lowest pass joins sites {ps.length_a:.2f} A apart"
    return nn


def resample(points_cart: np.ndarray, n: int) -> np.ndarray:
    """n points at equal arc length along a polyline, the two ends included."""
    seg = np.linalg.norm(np.diff(points_cart, axis=0), axis=1)
    s = np.concatenate([[0.0], np.cumsum(seg)])
    out = []
    for t in np.linspace(0.0, s[-1], n):
        i = min(int(np.searchsorted(s, t, side="right")) - 1, len(seg) - 1)
        f = 0.0 if seg[i] == 0 else (t - s[i]) / seg[i]
        out.append(points_cart[i] + f * (points_cart[i + 1] - points_cart[i]))
    return np.array(out)


# ----------------------------------------------------------------------------------------------
# relaxations and NEB


def relax(atoms, fmax=RELAX_FMAX, steps=RELAX_STEPS, cell=False):
    from ase.optimize import BFGS, FIRE

    atoms.calc = calculator(with_stress=cell)
    if cell:
        from ase.filters import FrechetCellFilter

        opt = FIRE(FrechetCellFilter(atoms), logfile=None)
    else:
        opt = BFGS(atoms, logfile=None, maxstep=0.1)
    conv = bool(opt.run(fmax=fmax, steps=steps))
    f = float(np.linalg.norm(atoms.get_forces(), axis=1).max())
    return float(atoms.get_potential_energy()), f, conv, opt.nsteps


def wrap_index(atoms, cart, tol=ON_SITE_A, symbol=None):
    """Index of the atom at `cart` (periodic), or None."""
    best, bi = math.inf, None
    cell = np.array(atoms.cell)
    for i, p in enumerate(atoms.positions):
        if symbol and atoms[i].symbol != symbol:
            continue
        d = min_image_dist(p, cart, cell)
        if d < best:
            best, bi = d, i
    return bi if best < tol else None


@dataclass
class NebResult:
    file: str
    ion: str
    mode: str
    pass_desc: str
    supercell: str
    atoms: int
    images: int
    barrier_ev: float
    start_energy_ev: float
    end_energy_ev: float
    max_force_ev_a: float
    converged: bool
    neb_steps: int
    hopmap_barrier_ev: float
    hopmap_pass_barrier_ev: float
    hopmap_dimension: int
    ordering: str
    wall_s: float
    hop_kind: str = ""
    hop_length_a: float = 0.0
    hopmap_hop_barrier_ev: float | None = None
    notes: list = field(default_factory=list)
    profile: list = field(default_factory=list)


def build_endpoints(struct, ion, ps: Pass, vacancy, min_image):
    """(base atoms without the moving ion, moving-ion path in Cartesian A, ordering note)."""
    from ase import Atoms

    if vacancy:
        od = order_structure(struct, min_image)
        atoms = od.atoms
    else:
        host = struct.copy()
        host.remove_species([sp for sp in host.composition.elements if sp.symbol == ion])
        od = order_structure(host, min_image)
        atoms = od.atoms
    m = od.unit_matrix
    path_c = ps.path_frac @ m
    if vacancy:
        # pick a copy of the pass (a unit-cell translation inside the supercell) that starts on
        # an ion; where ordering left some ion sites empty, prefer one that ends on an empty
        # site (the ion moves into an existing vacancy), else one that ends on an ion, which is
        # removed (a vacancy made for the hop)
        found = {}
        for rev, t in itertools.product((False, True),
                                        itertools.product(*(range(n) for n in od.mult))):
            pc = path_c[::-1] if rev else path_c
            sh = np.array(t) @ m
            i0 = wrap_index(atoms, pc[0] + sh, symbol=ion)
            if i0 is None:
                continue
            i1 = wrap_index(atoms, pc[-1] + sh)
            if i1 is None:
                found.setdefault("into an empty site", (pc + sh, i0, None, rev))
            elif atoms[i1].symbol == ion and i1 != i0:
                found.setdefault("vacancy made at the end site", (pc + sh, i0, i1, rev))
        if not found:
            raise OracleError("no copy of the pass starts on an ion after ordering")
        how = next(k for k in ("into an empty site", "vacancy made at the end site")
                   if k in found)
        path_c, i0, i1, rev = found[how]
        if rev:
            how += ", run end to start"
        base = atoms.copy()
        del base[sorted([i for i in (i0, i1) if i is not None], reverse=True)]
        od.note = (od.note + "; " if od.note else "") + f"vacancy hop {how}"
    else:
        base = atoms.copy()
    return base, path_c, od


def run_neb(path: Path, ion: str, binary=None, n_images=5, min_image=MIN_IMAGE_A,
            fmax=NEB_FMAX, steps=NEB_STEPS, log=print, hop_mode="auto") -> NebResult:
    """The oracle's barrier of the hop chosen by `choose_hop`. In interstitial mode with
    `hop_mode` "auto", a lowest pass whose relaxed ends turn out to be one well (they relax
    onto one point, or the band has no point above both ends by more than FLAT_EV) is run
    again over one whole channel repeat (`repeat_pass`), and the row says so."""
    t0 = time.time()
    binary = hopmap_bin(binary)
    struct = load_structure(path)
    doc = run_hopmap(binary, path, ion)
    vacancy = any(ion in site_elements(s) for s in struct)
    ps = choose_hop(doc, struct, ion, vacancy, hop_mode)
    try:
        res = _run_band(path, struct, ion, ps, vacancy, n_images, min_image, fmax, steps, log,
                        t0)
        no_top = res.barrier_ev < FLAT_EV or any(
            n.startswith(NO_TOP_NOTE) for n in res.notes)
        one_well = not vacancy and ps.kind != "channel repeat" and no_top
        first = (f"the lowest pass ({ps.length_a:.2f} A) gave {res.barrier_ev:.4f} eV with no "
                 "point of the band above both relaxed ends")
    except OracleError as e:
        if (vacancy or hop_mode != "auto" or ps.kind == "channel repeat"
                or "one site" not in str(e)):
            raise
        one_well = True
        first = f"the ends of the lowest pass ({ps.length_a:.2f} A) are or relax into one site"
    if one_well and hop_mode == "auto":
        log(f"  {first}: one well; running one channel repeat")
        rp = repeat_pass(doc, struct, ps)
        res = _run_band(path, struct, ion, rp, vacancy, n_images, min_image, fmax, steps, log,
                        t0)
        res.notes.insert(0, f"{first}: {REPEAT_NOTE}")
    return res


def climb(start, end, e0, e1, n_images, fmax, steps, ion_points=None):
    """Climbing-image NEB (improved tangent, FIRE) between two relaxed end points that carry
    the moving ion last. Interior images interpolate every atom linearly between the ends;
    `ion_points` (one position per interior image) puts the moving ion on a given path instead.
    One calculator per image (they share the model): a shared calculator recomputes every image
    several times per step. Returns (images, energies, converged, residual force, steps)."""
    from ase.mep import NEB
    from ase.optimize import FIRE

    e0, e1 = float(start.get_potential_energy()), float(end.get_potential_energy())
    images = [start]
    for k in range(1, n_images + 1):
        im = start.copy()
        f = k / (n_images + 1) if ion_points is None else ion_points[k - 1][0]
        im.positions = (1 - f) * start.positions + f * end.positions
        if ion_points is not None:
            im.positions[-1] = ion_points[k - 1][1]
        im.calc = _new_calculator(False)
        images.append(im)
    images.append(end)
    for im in (start, end):
        im.calc = _new_calculator(False)
    neb = NEB(images, climb=True, method="improvedtangent")
    opt = FIRE(neb, logfile=None)
    conv = bool(opt.run(fmax=fmax, steps=steps))
    energies = [e0] + [float(im.get_potential_energy()) for im in images[1:-1]] + [e1]
    return images, energies, conv, float(neb.get_residual()), opt.nsteps


def _run_band(path, struct, ion, ps: Pass, vacancy, n_images, min_image, fmax, steps, log,
              t0) -> NebResult:
    from ase import Atoms

    mode = "vacancy" if vacancy else "interstitial"
    log(f"{path.name} {ion}: {mode} mode; {ps.kind} ({ps.why}): {ps.description}")
    if ps.length_a < 0.3:
        raise OracleError(f"{path}: the hop's two ends are one site ({ps.length_a:.2f} A apart)")
    base, path_c, od = build_endpoints(struct, ion, ps, vacancy, min_image)
    reach = lattice_min_image(np.array(base.cell))
    if ps.length_a > 0.5 * reach:
        raise OracleError(f"{path}: the hop ({ps.length_a:.2f} A) is longer than half the "
                          f"supercell's shortest translation ({reach:.2f} A): the moving ion "
                          "would meet its own image")
    notes = []
    pts = resample(path_c, n_images + 2)

    def with_ion(pos):
        a = base.copy()
        a += Atoms(ion, positions=[pos])
        return a

    # a small kick along the path, away from the saddle, so that an end point that is a
    # stationary point by symmetry but not a minimum of the potential can slide off it
    # (plus a smaller fixed pseudo-random sideways part, so that an ion on a symmetric axis
    # can also leave it sideways)
    def away(p, q, seed):
        v = p - q
        v = v / max(np.linalg.norm(v), 1e-9) + 0.5 * _kick(seed) / KICK_A
        return KICK_A * v / np.linalg.norm(v)

    start = with_ion(pts[0] + away(pts[0], pts[1], 1))
    end = with_ion(pts[-1] + away(pts[-1], pts[-2], 2))
    e0, f0, c0, _ = relax(start)
    e1, f1, c1, _ = relax(end)
    log(f"  end points relaxed: {STATS['calls']} evaluations, {STATS['seconds']:.0f} s in the "
        f"model, {time.time() - t0:.0f} s so far")
    mv0 = float(np.linalg.norm(start.positions[-1] - pts[0]))
    mv1 = float(np.linalg.norm(end.positions[-1] - pts[-1]))
    log(f"  {len(start)} atoms ({'x'.join(map(str, od.mult))}); end points relaxed: "
        f"{e0:.4f} / {e1:.4f} eV; the ion moved {mv0:.2f} / {mv1:.2f} A")
    if not (c0 and c1):
        notes.append("an end point did not reach fmax in the step cap")
    if np.linalg.norm(start.positions[-1] - end.positions[-1]) < 0.3:
        raise OracleError(f"{path}: both end points relax into one site")
    for nm, mv in (("start", mv0), ("end", mv1)):
        if mv > 0.7:
            notes.append(f"{nm} ion slid {mv:.2f} A in relaxation (the minimum is not stable "
                         "under the potential)")
    # initial images: the ion along hopmap's path (shifted linearly by the end-point
    # relaxations), every other atom interpolated linearly between the relaxed end points
    seg = np.linalg.norm(np.diff(pts, axis=0), axis=1)
    s = np.concatenate([[0.0], np.cumsum(seg)]) / max(seg.sum(), 1e-12)
    d0 = start.positions[-1] - pts[0]
    d1 = end.positions[-1] - pts[-1]
    on_path = [(s[k], pts[k] + (1 - s[k]) * d0 + s[k] * d1) for k in range(1, n_images + 1)]
    images, energies, conv, fres, nsteps = climb(start, end, e0, e1, n_images, fmax, steps, on_path)
    log(f"  NEB: {STATS['calls']} evaluations, {STATS['seconds']:.0f} s in the model, "
        f"{time.time() - t0:.0f} s so far")
    barrier = max(energies) - min(e0, e1)
    dist = [0.0]
    for a, b in zip(images[:-1], images[1:]):
        dist.append(dist[-1] + float(np.linalg.norm(b.positions[-1] - a.positions[-1])))
    prof = [[round(d, 3), round(e - min(e0, e1), 4)] for d, e in zip(dist, energies)]
    if not conv:
        notes.append(f"NEB not converged in {steps} steps (max force {fres:.3f} eV/A)")
    imax = int(np.argmax(energies))
    if imax in (0, len(energies) - 1):
        notes.append(f"{NO_TOP_NOTE}: no barrier between the relaxed ends")
        if ps.kind == "channel repeat":
            notes.append("flat channel: no barrier over a whole repeat within the NEB's "
                         "resolution")
    wall = time.time() - t0
    log(f"  barrier {barrier:.3f} eV from the lower end; max force {fres:.3f} eV/A; "
        f"{'converged' if conv else 'NOT converged'} after {nsteps} steps; {wall:.0f} s")
    return NebResult(
        file=path.name, ion=ion, mode=mode, pass_desc=f"{ps.description} [{ps.why}]",
        supercell="x".join(map(str, od.mult)), atoms=len(start), images=n_images,
        barrier_ev=barrier, start_energy_ev=e0, end_energy_ev=e1, max_force_ev_a=fres,
        converged=conv, neb_steps=nsteps, hopmap_barrier_ev=ps.hopmap_barrier_ev,
        hopmap_pass_barrier_ev=ps.hopmap_pass_barrier_ev, hopmap_dimension=ps.dimension,
        ordering=od.note, wall_s=wall, notes=notes, profile=prof, hop_kind=ps.kind,
        hop_length_a=ps.length_a, hopmap_hop_barrier_ev=ps.hop_barrier_ev)


# ----------------------------------------------------------------------------------------------
# sites


def _kick(seed):
    """A small deterministic displacement (KICK_A long) that breaks site symmetry."""
    v = np.random.default_rng(seed).normal(size=3)
    return KICK_A * v / np.linalg.norm(v)


def run_sites(path: Path, ion: str, binary=None, min_image=MIN_IMAGE_A, log=print):
    """Returns (verdict sentence, list of per-orbit dicts, wall seconds)."""
    from ase import Atoms

    t0 = time.time()
    binary = hopmap_bin(binary)
    struct = load_structure(path)
    doc = run_hopmap(binary, path, ion)
    m = struct.lattice.matrix
    orbits = doc["site_orbits"]
    if not orbits:
        raise OracleError(f"{path}: hopmap finds no sites for {ion}")
    lowest = min(o["energy_ev"] for o in orbits)
    cand = sorted([o for o in orbits if o["energy_ev"] <= lowest + SITE_WINDOW_EV],
                  key=lambda o: o["energy_ev"])[:MAX_ORBITS]
    site_by_index = {s["index"]: s for s in doc["sites"]}
    ion_c = ion_positions(struct, ion)
    rows = []
    if len(ion_c) == 0:
        host = struct.copy()
        od = order_structure(host, min_image)
        for k, o in enumerate(cand):
            rep = site_by_index[o["sites"][0]]
            p = np.array(rep["frac"]) @ m
            a = od.atoms.copy()
            kick = _kick(k)
            a += Atoms(ion, positions=[p + kick])
            e, f, conv, _ = relax(a)
            fin = a.positions[-1]
            fin_frac = fin @ np.linalg.inv(m)
            hs, dist = nearest_site(doc, fin_frac, m)
            rows.append({"orbit": rep["orbit"],
                         "hopmap_ev": o["energy_ev"], "energy_ev": e, "converged": conv,
                         "moved_a": float(np.linalg.norm(fin - p)),
                         "ends_in_orbit": hs["orbit"] if hs and dist < 0.5 else None})
            log(f"  orbit {rep['orbit']} (hopmap {o['energy_ev']:.3f} eV): {e:.4f} eV, ion moved "
                f"{rows[-1]['moved_a']:.2f} A")
        e_min = min(r["energy_ev"] for r in rows)
        for r in rows:
            r["rel_ev"] = r["energy_ev"] - e_min
        best = min(rows, key=lambda r: r["energy_ev"])
        h0 = cand[0]
        h0_orbit = site_by_index[h0["sites"][0]]["orbit"]
        r0 = next(r for r in rows if r["orbit"] == h0_orbit)
        if best["orbit"] == h0_orbit or r0["rel_ev"] < 0.02:
            verdict = (f"agrees: hopmap's lowest orbit {h0_orbit} is the lowest after relaxation"
                       + (f" (orbit {best['orbit']} within {r0['rel_ev']:.3f} eV)"
                          if best["orbit"] != h0_orbit else ""))
        else:
            ends = best["ends_in_orbit"]
            verdict = (f"differs: lowest after relaxation is the ion placed at hopmap orbit "
                       f"{best['orbit']}"
                       + (f" (it ends in orbit {ends})" if ends not in (None, best["orbit"])
                          else " (it ends on no hopmap site)" if ends is None else "")
                       + "; "
                       f"hopmap's lowest orbit {h0_orbit} is {r0['rel_ev']:.3f} eV above"
                       + (f" and relaxes into orbit {r0['ends_in_orbit']}"
                          if r0["ends_in_orbit"] not in (None, h0_orbit) else ""))
    else:
        od = order_structure(struct, min_image)
        perfect = od.atoms.copy()
        # a small fixed rattle: a perfect crystal at a symmetric stationary point (mixed-valence
        # Mn or Co as one element) would otherwise stay above its relaxed state
        perfect.rattle(stdev=RATTLE_A, seed=7)
        e_perf = None  # the perfect crystal is relaxed only when a Frenkel move needs it
        occ_atoms = [i for i, a in enumerate(od.atoms) if a.symbol == ion]
        cell = np.array(od.atoms.cell)

        def on_ion(frac):
            c = np.asarray(frac) @ m
            return min(min_image_dist(c, x, m) for x in ion_c) < ON_SITE_A

        h0 = cand[0]
        h0_rep = site_by_index[h0["sites"][0]]
        lowest_occupied = on_ion(h0_rep["frac"])
        for o in cand:
            rep = site_by_index[o["sites"][0]]
            if on_ion(rep["frac"]):
                rows.append({"orbit": rep["orbit"], "hopmap_ev": o["energy_ev"],
                             "occupied": True, "rel_ev": 0.0})
                continue
            # move the ion nearest to one void of this orbit onto that void (a close Frenkel pair)
            best = None
            for sidx in o["sites"]:
                vf = np.array(site_by_index[sidx]["frac"])
                for t in itertools.product(*(range(n) for n in od.mult)):
                    vc = (vf + np.array(t)) @ m
                    for i in occ_atoms:
                        d = min_image_dist(od.atoms.positions[i], vc, cell)
                        if best is None or d < best[0] - 1e-6:
                            best = (d, i, vc)
                break  # one void of the orbit is enough (they are equivalent)
            d, i, vc = best
            if e_perf is None:
                e_perf, _, _, _ = relax(perfect)
            a = perfect.copy()
            # place it at the image of the void nearest to the ion
            delta = (vc - a.positions[i]) @ np.linalg.inv(cell)
            delta -= np.round(delta)
            a.positions[i] = a.positions[i] + delta @ cell
            target = a.positions[i].copy()
            a.positions[i] += _kick(i)
            e, f, conv, _ = relax(a)
            back = float(np.linalg.norm(a.positions[i] - perfect.positions[i]))
            rows.append({"orbit": rep["orbit"], "hopmap_ev": o["energy_ev"], "occupied": False,
                         "energy_ev": e, "rel_ev": e - e_perf, "hop_a": d,
                         "returned": back < 0.5,
                         "moved_a": float(np.linalg.norm(a.positions[i] - target))})
            log(f"  Frenkel move to orbit {rep['orbit']} ({d:.2f} A): {e - e_perf:+.3f} eV vs the "
                f"perfect crystal" + (" (ion returned to its site)" if back < 0.5 else ""))
        voids = [r for r in rows if not r["occupied"]]
        if lowest_occupied:
            verdict = "agrees: hopmap's lowest site is an occupied site of the ion"
        else:
            r0 = next(r for r in rows if r["orbit"] == h0_rep["orbit"])
            if r0.get("returned"):
                verdict = (f"differs: hopmap's lowest site (orbit {r0['orbit']}) is a void; "
                           "the moved ion returns to its site")
            else:
                verdict = (f"differs: hopmap's lowest site (orbit {r0['orbit']}) is a void; a "
                           f"Frenkel move into it costs {r0['rel_ev']:+.3f} eV")
        neg = [r for r in voids if r["rel_ev"] < -0.02 and not r.get("returned")]
        if neg:
            verdict += ("; the potential puts a void below the file's sites: orbits "
                        + ", ".join(str(r["orbit"]) for r in neg))
    wall = time.time() - t0
    log(f"  sites: {verdict} ({wall:.0f} s)")
    return verdict, rows, wall


# ----------------------------------------------------------------------------------------------
# relax command


def run_relax(path: Path, log=print):
    t0 = time.time()
    struct = load_structure(path)
    od = order_structure(struct, min_image=0.0)
    a = od.atoms.copy()
    before = a.copy()
    v0 = a.get_volume()
    e, f, conv, n = relax(a, cell=True, steps=RELAX_STEPS)
    # displacement in the fractional frame of each cell, mean shift removed
    sf0 = before.get_scaled_positions(wrap=False)
    sf1 = a.get_scaled_positions(wrap=False)
    d = sf1 - sf0
    d -= np.round(d)
    d -= d.mean(axis=0)
    disp = np.linalg.norm(d @ np.array(a.cell), axis=1)
    worst = int(np.argmax(disp))
    out = {
        "file": path.name, "atoms": len(a), "supercell": "x".join(map(str, od.mult)),
        "ordering": od.note,
        "energy_ev_per_atom": e / len(a), "max_force_ev_a": f, "converged": conv, "steps": n,
        "volume_change_pct": 100.0 * (a.get_volume() - v0) / v0,
        "cell_before": [round(float(x), 4) for x in before.cell.cellpar()],
        "cell_after": [round(float(x), 4) for x in a.cell.cellpar()],
        "max_displacement_a": float(disp.max()),
        "max_displacement_atom": f"{a[worst].symbol}{worst}",
        "mean_displacement_a": float(disp.mean()),
        "wall_s": time.time() - t0, "model": model_name(),
    }
    return out


# ----------------------------------------------------------------------------------------------
# results table


def read_table(path: Path):
    if not path.exists():
        return []
    with open(path, newline="") as fh:
        return list(csv.DictReader(fh))


def repo_relative(message) -> str:
    """A message with this checkout's absolute path cut to the repository-relative one, for
    what is stored in the tables (which travel with the repository)."""
    return str(message).replace(str(REPO) + os.sep, "")


def write_table(path: Path, rows, columns=None):
    """Whole table to a temporary file in the same folder, then renamed over the target."""
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=path.name + ".", suffix=".tmp", dir=str(path.parent))
    try:
        with os.fdopen(fd, "w", newline="") as fh:
            w = csv.DictWriter(fh, fieldnames=columns or CSV_COLUMNS, extrasaction="ignore")
            w.writeheader()
            for r in rows:
                w.writerow(r)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def fmt(x, nd=4):
    return "" if x is None else f"{x:.{nd}f}"


def row_from(res: NebResult | None, verdict, site_rows, wall, err_notes, path, ion):
    import ase

    r = {k: "" for k in CSV_COLUMNS}
    r.update(file=path.name, ion=ion, model=model_name(), ase_version=ase.__version__,
             date=datetime.date.today().isoformat(), wall_s=f"{wall:.0f}")
    notes = list(err_notes)
    if res is not None:
        r.update(mode=res.mode, **{"pass": res.pass_desc}, supercell=res.supercell,
                 atoms=res.atoms, images=res.images, barrier_ev=fmt(res.barrier_ev),
                 start_energy_ev=fmt(res.start_energy_ev), end_energy_ev=fmt(res.end_energy_ev),
                 end_minus_start_ev=fmt(res.end_energy_ev - res.start_energy_ev),
                 max_force_ev_a=fmt(res.max_force_ev_a, 3),
                 converged="yes" if res.converged else "no", neb_steps=res.neb_steps,
                 hop_kind=res.hop_kind, hop_length_a=fmt(res.hop_length_a, 2),
                 hopmap_hop_barrier_ev=fmt(res.hopmap_hop_barrier_ev),
                 hopmap_barrier_ev=fmt(res.hopmap_barrier_ev),
                 hopmap_pass_barrier_ev=fmt(res.hopmap_pass_barrier_ev),
                 hopmap_dimension=res.hopmap_dimension, ordering=res.ordering)
        notes = res.notes + notes
    if verdict:
        r["lowest_site_verdict"] = verdict
        r["site_energies"] = "; ".join(_site_text(s) for s in site_rows)
    r["notes"] = "; ".join(notes)
    return sanity_notes(r)


BROKEN_BAND_EV = 3.0
BROKEN_NOTE = "barrier above 3 eV: the band broke down, this is not a barrier"


def sanity_notes(r):
    """Notes that follow from the numbers of a row alone."""
    notes = [n for n in r["notes"].split("; ") if n] if r.get("notes") else []
    try:
        if float(r["barrier_ev"]) > BROKEN_BAND_EV and BROKEN_NOTE not in notes:
            notes.append(BROKEN_NOTE)
    except (KeyError, ValueError):
        pass
    r["notes"] = "; ".join(notes)
    return r


def _site_text(s):
    t = f"orbit {s['orbit']}: "
    if s.get("occupied"):
        return t + "occupied"
    t += f"{s['rel_ev']:+.3f} eV"
    if s.get("returned"):
        t += " (the moved ion returns to its site)"
    elif "ends_in_orbit" in s and s["ends_in_orbit"] != s["orbit"]:
        t += (f" (relaxes into orbit {s['ends_in_orbit']})" if s["ends_in_orbit"] is not None
              else f" (relaxes {s['moved_a']:.2f} A away, onto no hopmap site)")
    return t


def refs_rows(refs: Path):
    with open(refs, newline="") as fh:
        rows = list(csv.DictReader(fh))
    for i, r in enumerate(rows, start=2):
        if not r.get("file") or not r.get("ion"):
            raise OracleError(f"{refs}: line {i}: needs file and ion")
    return rows


REPEAT_NOTE = "one well, so the hop is one channel repeat"
STALE_NOTE = "stale: the stored NEB ran a different hop"


def stored_hop_length(r):
    """End-to-end length (A) of the hop a stored row's NEB ran: the `hop_length_a` column, or
    for rows written before it the "X A apart" of the `pass` column."""
    import re

    if r.get("hop_length_a"):
        return float(r["hop_length_a"])
    m = re.search(r"([0-9.]+) A apart", r.get("pass", ""))
    return float(m.group(1)) if m else None


def refresh_hopmap(rows, refs, out, table, binary, hop_mode="auto"):
    """Recompute the hopmap columns of the rows in `out` from the current hopmap, without the
    model: the network barrier, the pass barrier, and the barrier of the hop the current rules
    choose (`hopmap_hop_barrier_ev`, paired with the oracle's barrier). When that hop is not
    the one the stored NEB ran (another end-to-end length), the hop barrier is left empty and
    the row is marked stale: it needs a rerun before it counts."""
    binary = hopmap_bin(binary)
    files = {(Path(r["file"]).name, r["ion"]): (refs.parent / r["file"]).resolve() for r in rows}
    for r in table:
        path = files.get((r["file"], r["ion"]))
        if path is None or not r.get("mode"):
            continue
        struct = load_structure(path)
        doc = run_hopmap(binary, path, r["ion"])
        vacancy = r["mode"] == "vacancy"
        mode = hop_mode
        if not vacancy and hop_mode == "auto" and REPEAT_NOTE in r.get("notes", ""):
            mode = "repeat"
        notes = [n for n in (r.get("notes") or "").split("; ")
                 if n and not n.startswith(STALE_NOTE)]
        try:
            ps = choose_hop(doc, struct, r["ion"], vacancy, mode)
        except OracleError as e:
            r["hopmap_hop_barrier_ev"] = ""
            r["notes"] = "; ".join(notes + [f"{STALE_NOTE}: hopmap gives no hop now ({e})"])
            print(f"{r['file']} {r['ion']}: no hop now: {e}")
            continue
        was = stored_hop_length(r)
        r.update({"hopmap_barrier_ev": fmt(ps.hopmap_barrier_ev),
                  "hopmap_pass_barrier_ev": fmt(ps.hopmap_pass_barrier_ev),
                  "hopmap_dimension": ps.dimension})
        reach = None
        if r.get("supercell"):
            mult = np.array([int(x) for x in r["supercell"].split("x")])
            reach = lattice_min_image(struct.lattice.matrix * mult[:, None])
        if was is not None and reach is not None and was > 0.5 * reach:
            # a band written before run_neb refused such hops: its ion meets its own image
            r["hopmap_hop_barrier_ev"] = ""
            notes.append(f"{STALE_NOTE}: the hop ({was:.2f} A) is longer than half the "
                         f"supercell's shortest translation ({reach:.2f} A), refused now")
            state = "STALE: hop longer than half the supercell"
        elif was is not None and abs(was - ps.length_a) <= 0.02:
            r.update({"hop_kind": ps.kind, "hop_length_a": fmt(ps.length_a, 2),
                      "hopmap_hop_barrier_ev": fmt(ps.hop_barrier_ev)})
            state = f"{ps.kind}, {ps.length_a:.2f} A, {ps.hop_barrier_ev:.4f} eV"
        else:
            r["hopmap_hop_barrier_ev"] = ""
            notes.append(f"{STALE_NOTE} ({was} A) from the one chosen now ({ps.kind}, "
                         f"{ps.length_a:.2f} A): rerun")
            state = "STALE: rerun"
        r["notes"] = "; ".join(notes)
        sanity_notes(r)
        print(f"{r['file']} {r['ion']}: hopmap columns refreshed ({state})")
    write_table(out, table)
    return 0


def cmd_run_set(args):
    refs = Path(args.refs)
    out = Path(args.out)
    rows = refs_rows(refs)
    only = None  # row numbers, in the order given
    if args.only:
        only = []
        for tok in args.only.split(","):
            tok = tok.strip()
            picked = ([int(tok)] if tok.isdigit()
                      else [i for i, r in enumerate(rows, 1) if tok in r["file"]])
            only += [i for i in picked if i not in only and 1 <= i <= len(rows)]
    table = read_table(out)
    if args.refresh_hopmap:
        return refresh_hopmap(rows, refs, out, table, args.hopmap, args.hop_mode)
    done = {(r["file"], r["ion"]) for r in table}
    for i in (only if only is not None else range(1, len(rows) + 1)):
        ref = rows[i - 1]
        key = (Path(ref["file"]).name, ref["ion"])
        if key in done and not args.force:
            print(f"{key[0]} {key[1]}: in {out}, skipped (--force reruns)")
            continue
        path = (refs.parent / ref["file"]).resolve()
        t0 = time.time()
        res, verdict, srows, errs = None, "", [], []
        try:
            res = run_neb(path, ref["ion"], args.hopmap, args.images, args.min_image,
                          steps=args.steps, hop_mode=args.hop_mode)
        except Exception as e:  # one bad row never stops the set
            errs.append(f"neb skipped: {repo_relative(e)}")
            print(f"  neb failed: {e}", file=sys.stderr)
        if not args.no_sites:
            try:
                verdict, srows, _ = run_sites(path, ref["ion"], args.hopmap, args.min_image)
            except Exception as e:
                errs.append(f"sites skipped: {repo_relative(e)}")
                print(f"  sites failed: {e}", file=sys.stderr)
        row = row_from(res, verdict, srows, time.time() - t0, errs, path, ref["ion"])
        old = [r for r in read_table(out) if (r["file"], r["ion"]) == key]
        if args.no_sites and old and not row["lowest_site_verdict"]:
            # the site check was not rerun: the stored one still holds
            for k in ("lowest_site_verdict", "site_energies"):
                row[k] = old[0].get(k, "")
        table = [r for r in read_table(out) if (r["file"], r["ion"]) != key] + [row]
        order = {(Path(r["file"]).name, r["ion"]): k for k, r in enumerate(rows)}
        table.sort(key=lambda r: (order.get((r["file"], r["ion"]), 10**6), r["file"], r["ion"]))
        write_table(out, table)
        print(f"  row written to {out}")
    return 0


def cmd_neb(args):
    res = run_neb(Path(args.file), args.ion, args.hopmap, args.images, args.min_image,
                  steps=args.steps, hop_mode=args.hop_mode)
    if args.json:
        d = dict(res.__dict__)
        d["model"] = model_name()
        print(json.dumps(d, indent=1))
    else:
        print(f"barrier_ev {res.barrier_ev:.4f}  (hopmap channel barrier "
              f"{res.hopmap_barrier_ev:.4f} eV, pass {res.hopmap_pass_barrier_ev:.4f} eV)")
        print("profile [distance_a, energy_ev]:", res.profile)
        for n in res.notes:
            print("note:", n)
    return 0


def cmd_sites(args):
    verdict, rows, wall = run_sites(Path(args.file), args.ion, args.hopmap, args.min_image)
    if args.json:
        print(json.dumps({"verdict": verdict, "orbits": rows, "wall_s": wall,
                          "model": model_name()}, indent=1))
    else:
        print(verdict)
    return 0


def cmd_relax(args):
    out = run_relax(Path(args.file))
    if args.json:
        print(json.dumps(out, indent=1))
    else:
        print(f"{out['file']}: {out['atoms']} atoms ({out['supercell']}), "
              f"{'converged' if out['converged'] else 'NOT converged'} in {out['steps']} steps, "
              f"max force {out['max_force_ev_a']:.3f} eV/A")
        print(f"  cell before {out['cell_before']} (A, degrees)")
        print(f"  cell after  {out['cell_after']} (A, degrees)")
        print(f"  volume change {out['volume_change_pct']:+.2f} %; max displacement "
              f"{out['max_displacement_a']:.3f} A ({out['max_displacement_atom']}), mean "
              f"{out['mean_displacement_a']:.3f} A; {out['wall_s']:.0f} s; {out['model']}")
        if out["ordering"]:
            print("  " + out["ordering"])
    return 0


NO_TOP_NOTE = "highest energy at an end point"


# ----------------------------------------------------------------------------------------------
# direction: which way is easy for an interstitial ion


def _vector(text, what):
    try:
        v = np.array([float(x) for x in text.split(",")])
    except ValueError as e:
        raise OracleError(f"{what} '{text}': three comma-separated numbers") from e
    if v.shape != (3,):
        raise OracleError(f"{what} '{text}': three comma-separated numbers")
    return v


def run_direction(path: Path, ion: str, site, along, n_images=7, min_image=MIN_IMAGE_A,
                  fmax=RELAX_FMAX, steps=NEB_STEPS, log=print):
    """CI-NEB of one ion of `ion` in the empty host `path`, from `site` (fractional, the file's
    cell) to the same site one lattice vector `along` (integers, the file's cell) away, the
    framework free to relax. The straight line is the initial band; the climbing image finds
    the saddle. Returns one row of directions.csv."""
    from ase import Atoms

    t0 = time.time()
    struct = load_structure(path)
    if any(ion in site_elements(s) for s in struct):
        raise OracleError(f"{path}: holds {ion}; `direction` moves one interstitial ion "
                          "through an empty host (use `neb` for a host with the ion)")
    if np.any(np.abs(along - np.round(along)) > 1e-9) or not np.any(along):
        raise OracleError(f"--along {along.tolist()}: a non-zero lattice vector of whole "
                          "numbers")
    od = order_structure(struct, min_image)
    unit = od.unit_matrix
    mult = np.array(od.mult)
    hop = along @ unit
    length = float(np.linalg.norm(hop))
    # start in the middle cell of the supercell, so that the band stays inside it
    p0 = (np.array(site) % 1.0 + mult // 2) @ unit
    p1 = p0 + hop

    def with_ion(p):
        a = od.atoms.copy()
        a += Atoms(ion, positions=[p])
        return a

    start, end = with_ion(p0), with_ion(p1)
    e0, _, c0, _ = relax(start)
    e1, _, c1, _ = relax(end)
    moved = max(float(np.linalg.norm(start.positions[-1] - p0)),
                float(np.linalg.norm(end.positions[-1] - p1)))
    notes = []
    if not (c0 and c1):
        notes.append("an end point did not reach fmax in the step cap")
    if moved > 0.7:
        notes.append(f"an end ion slid {moved:.2f} A in relaxation: the site is not a "
                     "minimum under the potential")
    log(f"  {len(start)} atoms ({'x'.join(map(str, od.mult))}); end points relaxed: "
        f"{e0:.4f} / {e1:.4f} eV, {time.time() - t0:.0f} s so far; NEB along "
        f"{along.astype(int).tolist()} ...")
    _, energies, conv, fres, nsteps = climb(start, end, e0, e1, n_images, fmax, steps)
    low = min(e0, e1)
    barrier = max(energies) - low
    if int(np.argmax(energies)) in (0, len(energies) - 1):
        notes.append(f"{NO_TOP_NOTE}: no barrier between the relaxed ends")
    if not conv:
        notes.append(f"NEB not converged in {steps} steps")
    wall = time.time() - t0
    log(f"{path.name} {ion} from {np.round(site, 4).tolist()} along "
        f"{along.astype(int).tolist()} ({length:.2f} A): barrier {barrier:.3f} eV; "
        f"{'converged' if conv else 'NOT converged'} after {nsteps} steps; {wall:.0f} s")
    return {
        "file": path.name, "ion": ion,
        "site_frac": " ".join(f"{x:.4f}" for x in site),
        "along": " ".join(str(int(x)) for x in along),
        "hop_length_a": fmt(length, 3), "supercell": "x".join(map(str, od.mult)),
        "atoms": len(start), "images": n_images, "barrier_ev": fmt(barrier),
        "end_moved_a": fmt(moved, 3), "max_force_ev_a": fmt(fres, 3),
        "converged": "yes" if conv else "no", "neb_steps": nsteps,
        "profile_ev": " ".join(f"{e - low:.3f}" for e in energies),
        "model": model_name(), "ase_version": pkg_version("ase"),
        "date": datetime.date.today().isoformat(), "wall_s": f"{wall:.0f}",
        "notes": "; ".join(notes),
    }


def cmd_direction(args):
    path = Path(args.file)
    site = _vector(args.site, "--site")
    out = Path(args.out)
    rows = read_table(out)
    for text in args.along:
        row = run_direction(path, args.ion, site, _vector(text, "--along"), args.images,
                            args.min_image, steps=args.steps)
        key = (row["file"], row["ion"], row["site_frac"], row["along"])
        rows = [r for r in rows
                if (r["file"], r["ion"], r["site_frac"], r["along"]) != key] + [row]
        write_table(out, rows, DIRECTION_COLUMNS)
    return 0


def no_barrier(r):
    """A band whose highest point is one of its relaxed ends between two different wells: the
    number is the ends' energy difference, not a barrier. (Over a channel repeat the ends are
    one site and its image: there a band with no top is a flat channel, a barrier of zero.)"""
    return NO_TOP_NOTE in r.get("notes", "") and r.get("hop_kind") != "channel repeat"


OTHER_WELL_EV = 0.1  # relaxed ends this far apart, after an end ion slid: two different wells


def other_well(r):
    """An end ion slid in relaxation (the site hopmap names is not a minimum under the
    potential) and the relaxed ends lie in two wells more than OTHER_WELL_EV apart: the band
    starts or ends somewhere else, so it is not the hop hopmap gives a barrier for."""
    try:
        d = abs(float(r.get("end_minus_start_ev") or "nan"))
    except ValueError:
        return False
    return " slid " in (r.get("notes") or "") and d > OTHER_WELL_EV


def paired_rows(rows):
    """Rows that enter the rank correlation: a converged NEB with a barrier (see `no_barrier`),
    whose ends are the hop hopmap names (see `other_well`), and hopmap's barrier of the same
    hop (`hopmap_hop_barrier_ev`, empty when the row is stale). The evidence bench
    (crates/hopmap/benches/model_evidence.rs) pairs the same rows the same way."""
    return [r for r in rows
            if r.get("barrier_ev") and r.get("hopmap_hop_barrier_ev") and r["converged"] == "yes"
            and not no_barrier(r) and not other_well(r)]


def cmd_summary(args):
    """results.csv as a Markdown table, then the rank correlations."""
    rows = read_table(Path(args.results))
    print("| file | ion | mode | hop | hop length (A) | atoms | oracle barrier (eV) | "
          "hopmap, same hop (eV) | hopmap network (eV) | converged | wall (s) | lowest site |")
    print("|---|---|---|---|---|---|---|---|---|---|---|---|")
    for r in rows:
        verdict = r["lowest_site_verdict"].split(":")[0] if r["lowest_site_verdict"] else ""
        hop = r.get("hop_kind", "")
        if STALE_NOTE in r.get("notes", ""):
            hop = (hop + ", " if hop else "") + "stale"
        elif no_barrier(r):
            hop = (hop + ", " if hop else "") + "no barrier"
        print(f"| {r['file']} | {r['ion']} | {r['mode']} | {hop} | {r.get('hop_length_a', '')} "
              f"| {r['atoms']} | {r['barrier_ev']} | {r.get('hopmap_hop_barrier_ev', '')} | "
              f"{r['hopmap_barrier_ev']} | {r['converged']} | {r['wall_s']} | {verdict} |")
    pairs = paired_rows(rows)
    if len(pairs) >= 3:
        ora = [float(r["barrier_ev"]) for r in pairs]
        rho = spearman(ora, [float(r["hopmap_hop_barrier_ev"]) for r in pairs])
        rho_net = spearman(ora, [float(r["hopmap_barrier_ev"]) for r in pairs])
        print(f"\nrank correlation (Spearman) of hopmap's barrier of the same hop with the "
              f"oracle's, converged rows: {rho:.2f} over {len(pairs)} rows (hopmap's network "
              f"barrier instead: {rho_net:.2f})")
        # both against the published values (mid-points of references.csv's ranges), over the
        # paired rows that have one
        refs = Path(args.refs)
        mids = {}
        if refs.exists():
            for r in refs_rows(refs):
                if r.get("barrier_low_eV") and r.get("barrier_high_eV"):
                    mids[(Path(r["file"]).name, r["ion"])] = 0.5 * (
                        float(r["barrier_low_eV"]) + float(r["barrier_high_eV"]))
        pub = [(mids[(r["file"], r["ion"])], float(r["barrier_ev"]),
                float(r["hopmap_hop_barrier_ev"])) for r in pairs
               if (r["file"], r["ion"]) in mids]
        if len(pub) >= 3:
            mid = [p[0] for p in pub]
            print(f"against the published mid-points ({refs.name}), the {len(pub)} of these rows "
                  f"that have one: the oracle {spearman(mid, [p[1] for p in pub]):.2f}, "
                  f"hopmap {spearman(mid, [p[2] for p in pub]):.2f}")
    verdicts = [r["lowest_site_verdict"] for r in rows if r["lowest_site_verdict"]]
    agree = sum(v.startswith("agrees") for v in verdicts)
    if verdicts:
        print(f"lowest site: hopmap and the oracle agree on {agree} of {len(verdicts)} hosts")
    return 0


def spearman(x, y):
    """Spearman's rank correlation with average ranks for ties."""
    def ranks(v):
        order = sorted(range(len(v)), key=lambda i: v[i])
        r = [0.0] * len(v)
        i = 0
        while i < len(order):
            j = i
            while j + 1 < len(order) and v[order[j + 1]] == v[order[i]]:
                j += 1
            for k in range(i, j + 1):
                r[order[k]] = (i + j) / 2 + 1
            i = j + 1
        return r
    rx, ry = ranks(x), ranks(y)
    mx, my = sum(rx) / len(rx), sum(ry) / len(ry)
    cov = sum((a - mx) * (b - my) for a, b in zip(rx, ry))
    vx = sum((a - mx) ** 2 for a in rx) ** 0.5
    vy = sum((b - my) ** 2 for b in ry) ** 0.5
    return cov / (vx * vy) if vx and vy else float("nan")


def cmd_self_test(args):
    """Checks of the hop choice against geometry facts, without the model (pymatgen, NumPy and
    the hopmap binary only). Prints one line per check and a closing "N passed, N failed"."""
    binary = hopmap_bin(args.hopmap)
    ref = REPO / "structures" / "reference"
    results = []

    def check(name, ok, detail=""):
        results.append(bool(ok))
        print(f"self-test: {'ok    ' if ok else 'FAILED'} {name}"
              + (f" ({detail})" if detail else ""))

    def hop(fname, ion, hop_mode="auto"):
        path = ref / fname
        struct = load_structure(path)
        doc = run_hopmap(binary, path, ion)
        vac = any(ion in site_elements(x) for x in struct)
        return struct, doc, choose_hop(doc, struct, ion, vac, hop_mode)

    # rock salt: the cation sublattice is face-centred cubic, nearest cations a/sqrt(2) apart
    # (textbook crystallography); hopmap's lowest pass there joins next-nearest cations, so the
    # nearest hop is taken; it passes the empty tetrahedral site of the anion sublattice, a
    # quarter of a body diagonal from a corner ((1/4, 1/4, 1/4) and its images).
    for fname, ion in (("LiF_rocksalt.cif", "Li"), ("NaCl_rocksalt.cif", "Na")):
        struct, doc, h = hop(fname, ion)
        a = struct.lattice.a
        check(f"{fname}: nearest hop chosen", h.kind == "nearest hop", h.why)
        check(f"{fname}: hop length a/sqrt(2)", abs(h.length_a - a / math.sqrt(2)) < 0.01,
              f"{h.length_a:.3f} A against {a / math.sqrt(2):.3f} A")
        mids = h.path_frac[2:-2:2] if len(h.path_frac) > 3 else []
        tet = [x for x in mids if np.allclose(np.abs((x % 0.5) - 0.25), 0.0, atol=0.02)]
        check(f"{fname}: through the tetrahedral site", h.chain == 2 and len(tet) == 1,
              f"{h.chain} network hops, intermediate {np.round(mids, 3).tolist()}")
        by = {x["index"]: x for x in doc["sites"]}
        sad = max(doc["hops"][n]["saddle_ev"] for n in h.network_hops)
        e0 = by[doc["hops"][h.network_hops[0]]["from"]]["energy_ev"]
        e0 = min(e0, *(x["energy_ev"] for x in doc["sites"] if x["orbit"] == h.start_orbit))
        check(f"{fname}: hop barrier = highest saddle of its hops minus the end site",
              abs(h.hop_barrier_ev - (sad - e0)) < 1e-6, f"{h.hop_barrier_ev:.4f} eV")
    # olivine LiFePO4: Li on the 4a inversion centres, nearest along b at b/2 (the olivine
    # structure, Pnma): the lowest pass already joins a nearest pair and is kept
    struct, doc, h = hop("LiFePO4_olivine.cif", "Li")
    b = struct.lattice.b
    check("LiFePO4_olivine.cif: lowest pass kept", h.kind == "lowest pass", h.why)
    check("LiFePO4_olivine.cif: hop length b/2", abs(h.length_a - b / 2) < 0.01,
          f"{h.length_a:.3f} A against {b / 2:.3f} A")
    # alpha-Li3N: Li2 on the 2c sites of the Li2N layer, a/sqrt(3) apart (P6/mmm)
    struct, doc, h = hop("Li3N_alpha.cif", "Li")
    a = struct.lattice.a
    check("Li3N_alpha.cif: nearest hop within the Li2N layer",
          h.kind == "nearest hop" and abs(h.length_a - a / math.sqrt(3)) < 0.01,
          f"{h.kind}, {h.length_a:.3f} A against {a / math.sqrt(3):.3f} A")
    # interstitial channel repeat: the end is the start translated by the channel's lattice
    # vector (rutile TiO2, c axis)
    struct, doc, h = hop("TiO2_rutile.cif", "Li", "repeat")
    c = struct.lattice.c
    check("TiO2_rutile.cif: channel repeat ends one c apart",
          np.allclose(h.end_frac - h.start_frac, [0, 0, 1], atol=1e-6)
          and abs(h.length_a - c) < 1e-6, f"{h.length_a:.3f} A against c = {c:.3f} A")
    # Spearman's coefficient, exact small cases: 1 - 6 sum d^2 / (n (n^2 - 1))
    check("spearman: one swap in four is 0.8", abs(spearman([1, 2, 3, 4], [1, 3, 2, 4]) - 0.8)
          < 1e-12)
    check("spearman: reversed order is -1", abs(spearman([1, 2, 3], [3, 2, 1]) + 1) < 1e-12)
    # the pairing rule on made-up rows: a slid end into a well 0.7 eV away is another hop; two
    # slid ends at one energy (equivalent positions) and an unslid asymmetric band are kept
    slid = "start ion slid 1.87 A in relaxation (the minimum is not stable under the potential)"
    check("pairing: slid end, ends 0.70 eV apart, left out",
          other_well({"notes": slid, "end_minus_start_ev": "0.6985"}))
    check("pairing: slid ends at one energy kept",
          not other_well({"notes": slid, "end_minus_start_ev": "0.0031"}))
    check("pairing: asymmetric band without a slide kept",
          not other_well({"notes": "", "end_minus_start_ev": "0.6985"}))
    # stored tables travel with the repository: no checkout's absolute path in them
    check("stored messages are repository-relative",
          repo_relative(f"{REPO}{os.sep}structures{os.sep}x.cif: bad") ==
          f"structures{os.sep}x.cif: bad")
    stored = "".join(p.read_text() for p in (DEFAULT_RESULTS, DEFAULT_DIRECTIONS) if p.exists())
    check("results.csv and directions.csv name no absolute path",
          not any(m in stored for m in ("/work/", "/home/", "/tmp/", str(REPO))))
    passed = sum(results)
    print(f"{passed} passed, {len(results) - passed} failed")
    return 0 if passed == len(results) else 1


def cmd_ci(args):
    results = Path(args.results)
    stored = next((r for r in read_table(results)
                   if r["file"] == CI_FILE and r["ion"] == CI_ION), None)
    if stored is None or not stored.get("barrier_ev"):
        print(f"ci: {results} has no {CI_FILE} {CI_ION} row with a barrier", file=sys.stderr)
        return 1
    path = REPO / "structures" / "reference" / CI_FILE
    res = run_neb(path, CI_ION, args.hopmap, int(stored["images"] or 5), MIN_IMAGE_A)
    want = float(stored["barrier_ev"])
    e_want = float(stored["start_energy_ev"])
    checks = [
        (f"barrier {res.barrier_ev:.4f} eV vs stored {want:.4f} eV (tolerance {CI_TOL_EV} eV)",
         abs(res.barrier_ev - want) <= CI_TOL_EV),
        (f"relaxed start {res.start_energy_ev:.4f} eV vs stored {e_want:.4f} eV (tolerance "
         f"{CI_ENERGY_TOL_EV} eV: the model, its version and the structure)",
         abs(res.start_energy_ev - e_want) <= CI_ENERGY_TOL_EV),
        (f"{res.atoms} atoms in a {res.supercell} cell, {res.mode} mode, as stored",
         str(res.atoms) == stored["atoms"] and res.supercell == stored["supercell"]
         and res.mode == stored["mode"]),
        (f"NEB converged (max force {res.max_force_ev_a:.3f} eV/A)", res.converged),
    ]
    ok = all(c for _, c in checks)
    for text, c in checks:
        print(f"ci: {'ok    ' if c else 'FAILED'} {text}")
    print(f"ci: {CI_FILE} {CI_ION}: {'ok' if ok else 'FAILED'} in {res.wall_s:.0f} s")
    return 0 if ok else 1


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0],
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    sub = ap.add_subparsers(dest="cmd", required=True)

    def hop_mode(p):
        p.add_argument("--hop-mode", choices=["auto", "pass", "nearest", "repeat"],
                       default="auto", help="which hop: the lowest pass, the nearest-neighbour "
                       "vacancy hop, one channel repeat, or auto (default; see README)")

    def common(p, ion=True):
        p.add_argument("--hopmap", help="hopmap binary (default: $HOPMAP_BIN or "
                       "target/release/hopmap)")
        p.add_argument("--min-image", type=float, default=MIN_IMAGE_A,
                       help=f"least distance between periodic images of the ion, A "
                       f"(default {MIN_IMAGE_A})")

    p = sub.add_parser("neb", help="oracle barrier of hopmap's lowest channel")
    p.add_argument("file")
    p.add_argument("--ion", required=True)
    p.add_argument("--images", type=int, default=5, help="interior NEB images (default 5)")
    p.add_argument("--steps", type=int, default=NEB_STEPS, help="NEB step cap")
    p.add_argument("--json", action="store_true")
    common(p)
    hop_mode(p)
    p.set_defaults(fn=cmd_neb)

    p = sub.add_parser("sites", help="is hopmap's lowest site the real lowest site?")
    p.add_argument("file")
    p.add_argument("--ion", required=True)
    p.add_argument("--json", action="store_true")
    common(p)
    p.set_defaults(fn=cmd_sites)

    p = sub.add_parser("relax", help="relax positions and cell; displacements, volume change")
    p.add_argument("file")
    p.add_argument("--json", action="store_true")
    p.set_defaults(fn=cmd_relax)

    p = sub.add_parser("run-set", help="neb and sites for every row of a references table")
    p.add_argument("--refs", default=str(DEFAULT_REFS))
    p.add_argument("--out", default=str(DEFAULT_RESULTS))
    p.add_argument("--only", help="row numbers (1 = first data row) or file-name parts, "
                   "comma-separated; run in that order")
    p.add_argument("--force", action="store_true", help="rerun rows already in --out")
    p.add_argument("--images", type=int, default=5)
    p.add_argument("--steps", type=int, default=NEB_STEPS, help="NEB step cap")
    p.add_argument("--no-sites", action="store_true", help="skip the site check")
    p.add_argument("--refresh-hopmap", action="store_true",
                   help="only recompute the hopmap columns of the rows already in --out")
    common(p)
    hop_mode(p)
    p.set_defaults(fn=cmd_run_set)

    p = sub.add_parser("summary", help="results.csv as a Markdown table")
    p.add_argument("--results", default=str(DEFAULT_RESULTS))
    p.add_argument("--refs", default=str(DEFAULT_REFS),
                   help="references table with the published barrier ranges")
    p.set_defaults(fn=cmd_summary)

    p = sub.add_parser("self-test", help="hop choice checked against geometry facts "
                       "(no model; seconds)")
    p.add_argument("--hopmap")
    p.set_defaults(fn=cmd_self_test)

    p = sub.add_parser("direction", help="one interstitial ion from a site to its image along "
                       "lattice vectors: which direction is easy")
    p.add_argument("file")
    p.add_argument("--ion", required=True)
    p.add_argument("--site", required=True, help="fractional coordinates x,y,z (file's cell)")
    p.add_argument("--along", action="append", required=True,
                   help="lattice vector u,v,w (whole numbers; repeat for several)")
    p.add_argument("--images", type=int, default=7, help="interior NEB images (default 7)")
    p.add_argument("--steps", type=int, default=NEB_STEPS, help="NEB step cap")
    p.add_argument("--out", default=str(DEFAULT_DIRECTIONS))
    p.add_argument("--min-image", type=float, default=MIN_IMAGE_A)
    p.set_defaults(fn=cmd_direction)

    p = sub.add_parser("ci", help=f"fast check: {CI_FILE} {CI_ION} NEB against results.csv")
    p.add_argument("--results", default=str(DEFAULT_RESULTS))
    p.add_argument("--hopmap")
    p.set_defaults(fn=cmd_ci)

    args = ap.parse_args(argv)
    try:
        return args.fn(args)
    except OracleError as e:
        print(f"error: {e}", file=sys.stderr)
        return 1


if __name__ == "__main__":
    sys.exit(main())

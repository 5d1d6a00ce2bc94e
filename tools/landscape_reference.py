#!/usr/bin/env python3
"""Independent NumPy evaluation of hopmap's two bond-valence landscapes.

Reads a landscape model written by hopmap (``hopmap::landscape::export::model_to_json``), evaluates
on the grid of NA x NB x NC points (point (i, j, k) at fractional (i/NA, j/NB, k/NC)):

  valence mismatch  |sum_X occ exp((r0 - R)/b) - V_A|                          (v.u.)
  site energy       sum_X occ D0 [m(R) - m(cutoff)]
                    + sum_M occ k q_A q_M erfc(R/rho) / R                      (eV)

with m(R) = (exp((Rmin - R)/b) - 1)^2 - 1 (the Morse term shifted to zero at the anion cutoff),
anions counted for R < cutoff of their kind, cations for R < coulomb_cutoff (the full cutoff, in
every periodic image), R clamped to 1e-6 A, then capped at the model's caps.

Writes <OUT>_mismatch.npy and <OUT>_energy.npy (float64, shape (NA, NB, NC)). Given hopmap's own
grids (--compare-mismatch, --compare-energy), prints the maximum relative error of each field
over the points where neither value is capped; values smaller than --absolute-below (default
1e-3, v.u. or eV) are compared absolutely. Exits with status 1 if an error exceeds --tolerance.

Needs numpy; uses scipy.special.erfc when scipy is installed, math.erfc otherwise.
"""

import argparse
import json
import math
import sys
import time

import numpy as np

try:
    from scipy.special import erfc as _erfc
except ImportError:  # pragma: no cover - depends on the environment
    _erfc = np.vectorize(math.erfc, otypes=[float])

R_GUARD = 1e-6
SMALL = 1e-3


def load_model(path):
    with open(path, encoding="utf-8") as f:
        return json.load(f)


def grid_points(lattice, dims):
    """Cartesian positions (A) of all grid points, C order, shape (N, 3)."""
    na, nb, nc = dims
    fi, fj, fk = np.meshgrid(
        np.arange(na) / na, np.arange(nb) / nb, np.arange(nc) / nc, indexing="ij"
    )
    frac = np.stack([fi.ravel(), fj.ravel(), fk.ravel()], axis=1)
    return frac @ lattice  # lattice rows are a, b, c


def images(lattice, frac, reach):
    """Cartesian images of a fractional position that can lie within `reach` of the cell."""
    volume = abs(np.linalg.det(lattice))
    a, b, c = lattice
    widths = [
        volume / np.linalg.norm(np.cross(b, c)),
        volume / np.linalg.norm(np.cross(c, a)),
        volume / np.linalg.norm(np.cross(a, b)),
    ]
    n = [int(math.ceil(reach / w)) + 1 for w in widths]
    f = np.asarray(frac) % 1.0
    t = np.array(
        [
            (i, j, k)
            for i in range(-n[0], n[0] + 1)
            for j in range(-n[1], n[1] + 1)
            for k in range(-n[2], n[2] + 1)
        ],
        dtype=float,
    )
    cart = (f + t) @ lattice
    centre = np.array([0.5, 0.5, 0.5]) @ lattice
    corners = np.array([[i, j, k] for i in (0, 1) for j in (0, 1) for k in (0, 1)], float)
    circum = np.max(np.linalg.norm(corners @ lattice - centre, axis=1))
    keep = np.linalg.norm(cart - centre, axis=1) <= reach + circum
    return cart[keep]


def evaluate(model, dims):
    lattice = np.array(model["lattice_vectors"], dtype=float)
    pts = grid_points(lattice, dims)
    probe = model["probe"]
    k_coul = model["coulomb_constant"]
    bvs = np.zeros(len(pts))
    energy = np.zeros(len(pts))
    for atom in model["atoms"]:
        occ = atom["occupancy"]
        if atom["kind"] == "anion":
            kind = model["anion_kinds"][atom["index"]]
            cutoff = kind["cutoff"]
        else:
            kind = model["cation_kinds"][atom["index"]]
            cutoff = model["coulomb_cutoff"]
        for img in images(lattice, atom["frac"], cutoff):
            r = np.sqrt(np.sum((pts - img) ** 2, axis=1))
            inside = np.nonzero(r < cutoff)[0]
            if inside.size == 0:
                continue
            ri = np.maximum(r[inside], R_GUARD)
            if atom["kind"] == "anion":
                r0, b, rmin, d0 = kind["r0"], kind["b"], kind["rmin"], kind["d0"]
                bvs[inside] += occ * np.exp((r0 - ri) / b)
                m = (np.exp((rmin - ri) / b) - 1.0) ** 2 - 1.0
                m_cut = (math.exp((rmin - cutoff) / b) - 1.0) ** 2 - 1.0
                energy[inside] += occ * d0 * (m - m_cut)
            else:
                q = k_coul * probe["charge"] * kind["charge"]
                energy[inside] += occ * q * _erfc(ri / kind["rho"]) / ri
    mismatch = np.abs(bvs - probe["valence"])
    with np.errstate(invalid="ignore"):
        mismatch = np.where(mismatch < model["mismatch_cap"], mismatch, model["mismatch_cap"])
        energy = np.where(energy < model["energy_cap"], energy, model["energy_cap"])
    shape = tuple(dims)
    return mismatch.reshape(shape), energy.reshape(shape)


def max_relative_error(ours, ref, cap, small=SMALL):
    """Largest |ours - ref| / max(|ref|, small) where neither value is at the cap."""
    ours = ours.astype(float)
    free = (ref < cap * (1 - 1e-6)) & (ours < cap * (1 - 1e-6))
    if not np.any(free):
        return 0.0, 0
    err = np.abs(ours[free] - ref[free]) / np.maximum(np.abs(ref[free]), small)
    return float(err.max()), int(free.sum())


def main(argv=None):
    p = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    p.add_argument("model", help="model JSON written by hopmap")
    p.add_argument("dims", nargs=3, type=int, help="grid points along a, b, c")
    p.add_argument("--out", help="prefix of the .npy files to write")
    p.add_argument("--compare-mismatch", help="hopmap's mismatch grid (.npy)")
    p.add_argument("--compare-energy", help="hopmap's energy grid (.npy)")
    p.add_argument("--tolerance", type=float, default=1e-6)
    p.add_argument("--absolute-below", type=float, default=SMALL,
                   help="values smaller than this (v.u. or eV) are compared absolutely "
                   "(default 1e-3; 1 for an f32 grid, whose sums of terms of order 1 carry "
                   "absolute errors of order 1e-7 wherever they cancel)")
    args = p.parse_args(argv)

    model = load_model(args.model)
    start = time.perf_counter()
    mismatch, energy = evaluate(model, args.dims)
    seconds = time.perf_counter() - start
    print(f"numpy reference: {mismatch.size} points in {seconds:.3f} s")
    print(f"seconds {seconds:.6f}")
    if args.out:
        np.save(args.out + "_mismatch.npy", mismatch)
        np.save(args.out + "_energy.npy", energy)

    ok = True
    for name, path, ref, cap, unit in [
        ("mismatch", args.compare_mismatch, mismatch, model["mismatch_cap"], "v.u."),
        ("energy", args.compare_energy, energy, model["energy_cap"], "eV"),
    ]:
        if not path:
            continue
        ours = np.load(path)
        if ours.shape != ref.shape:
            print(f"{name}: shape {ours.shape} differs from the reference {ref.shape}")
            ok = False
            continue
        err, n = max_relative_error(ours, ref, cap, args.absolute_below)
        print(
            f"max relative error {name} {err:.3e} over {n} uncapped points "
            f"(values below {args.absolute_below} {unit} compared absolutely)"
        )
        if not err <= args.tolerance:
            ok = False
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())

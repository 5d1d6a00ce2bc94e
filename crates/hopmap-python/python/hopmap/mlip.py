"""A machine-learned second opinion on a hop handed on by ``hopmap neb``.

Optional extra of the hopmap Python package: it needs ``chgnet`` (a universal machine-learned
interatomic potential whose pretrained weights ship inside the PyPI package; Deng et al., Nat.
Mach. Intell. 5 (2023) 1031) and ``ase`` (relaxations and the climbing-image NEB of Henkelman,
Uberuaga & Jonsson, J. Chem. Phys. 113 (2000) 9901). Install with ``pip install "hopmap[mlip]"``
(or ``pip install chgnet``, which brings torch and ase). Nothing else in hopmap imports this module; it runs on the CPU, one
thread, and only when called.

    from hopmap.mlip import refine
    result = refine("neb-LiFePO4")          # the folder written by `hopmap neb`
    print(result["barrier_ev"], result["bv"]["barrier_ev"])

or from a shell: ``python -m hopmap.mlip neb-LiFePO4``. Writes ``mlip.json`` (schema
``hopmap.mlip/1``, see the README) and ``mlip_images.xyz`` (the relaxed band) into the folder;
``hopmap neb FILE --mlip-result FOLDER/mlip.json`` prints the barrier beside hopmap's own.

What it does: reads the images (``images.xyz``) and ``neb.json``; relaxes the two end points
(positions, fixed cell, BFGS to 0.05 eV/A) after a 0.05 A kick of the moving ion away from the
path, so that an end point held on a symmetric stationary point can slide off it; builds the
band from hopmap's images (the moving ion on hopmap's path, shifted linearly by the end-point
relaxations; every other atom interpolated linearly between the relaxed end points); runs a
climbing-image NEB (improved tangent, spring 0.1 eV/A^2, FIRE to 0.1 eV/A, 300-step cap).
The barrier is the highest image over the lower relaxed end point.

Such potentials are trained near equilibrium and read migration barriers low, typically by
about 0.1 eV: use the number for ranking and as a check of the bond-valence path, not as a
substitute for DFT. Energies in eV, distances in A, forces in eV/A, times in s.
"""

from __future__ import annotations

import os

os.environ.setdefault("OMP_NUM_THREADS", "1")

import argparse
import io
import json
import sys
import time
import warnings
from contextlib import redirect_stdout
from pathlib import Path

SCHEMA = "hopmap.mlip/1"
NEB_SCHEMA = "hopmap.neb/1"
RELAX_FMAX = 0.05  # eV/A
RELAX_STEPS = 500
NEB_FMAX = 0.1  # eV/A
NEB_STEPS = 300
SPRING = 0.1  # eV/A^2
KICK_A = 0.05  # end-point ion displaced before relaxing


class MlipError(Exception):
    """A failure with a plain sentence naming the file."""


def available() -> bool:
    """True when the optional packages (chgnet, ase) can be imported."""
    try:
        import ase  # noqa: F401
        import chgnet  # noqa: F401
    except ImportError:
        return False
    return True


_MODEL = None


def _model(threads: int):
    global _MODEL
    if _MODEL is None:
        try:
            import torch
            from chgnet.model import CHGNet
        except ImportError as e:
            raise MlipError(
                "the machine-learned second opinion needs the optional packages chgnet and "
                f"ase (pip install chgnet): {e}"
            ) from e
        torch.set_num_threads(threads)
        try:
            torch.set_num_interop_threads(threads)
        except RuntimeError:
            pass
        with redirect_stdout(io.StringIO()):
            _MODEL = CHGNet.load(use_device="cpu", verbose=False)
    return _MODEL


def _calculator(threads: int):
    """A CHGNet calculator for fixed-cell work (energy and forces, no stress)."""
    import numpy as np
    from chgnet.model.dynamics import CHGNetCalculator

    class _Calc(CHGNetCalculator):
        def calculate(self, atoms=None, properties=None, system_changes=None, task=None):
            super().calculate(atoms, properties, system_changes, task="ef")
            self.results.setdefault("magmoms", np.zeros(len(atoms)))

    with redirect_stdout(io.StringIO()):
        c = _Calc(model=_model(threads), use_device="cpu")
    c.implemented_properties = ["energy", "free_energy", "forces"]
    return c


def _kick(seed: int):
    import numpy as np

    v = np.random.default_rng(seed).normal(size=3)
    return KICK_A * v / np.linalg.norm(v)


def _mic(d, cell):
    """Minimum-image form of a Cartesian displacement."""
    import numpy as np

    f = np.linalg.solve(cell.T, d)
    f -= np.round(f)
    return cell.T @ f


def _write_atomic(path: Path, text: str):
    tmp = path.with_name(f".{path.name}.tmp-{os.getpid()}")
    try:
        tmp.write_text(text)
        os.replace(tmp, path)
    finally:
        if tmp.exists():
            tmp.unlink()


def read_folder(folder):
    """(neb.json document, list of ASE images) of a folder written by ``hopmap neb``."""
    folder = Path(folder)
    doc_path = folder / "neb.json"
    xyz_path = folder / "images.xyz"
    try:
        doc = json.loads(doc_path.read_text())
    except FileNotFoundError as e:
        raise MlipError(f"{doc_path}: not found (is {folder} a folder written by hopmap neb?)") from e
    except json.JSONDecodeError as e:
        raise MlipError(f"{doc_path}: line {e.lineno}, column {e.colno}: not JSON: {e.msg}") from e
    if doc.get("schema") != NEB_SCHEMA:
        raise MlipError(f"{doc_path}: schema {doc.get('schema')!r} is not {NEB_SCHEMA}")
    from ase.io import read

    try:
        images = read(str(xyz_path), index=":")
    except FileNotFoundError as e:
        raise MlipError(f"{xyz_path}: not found") from e
    except Exception as e:  # ASE raises several kinds on a damaged file
        raise MlipError(f"{xyz_path}: cannot read the images: {e}") from e
    if len(images) < 3:
        raise MlipError(f"{xyz_path}: {len(images)} images; a band needs at least 3")
    if len(images) != len(doc.get("images", [])):
        raise MlipError(f"{xyz_path}: {len(images)} images but neb.json lists {len(doc['images'])}")
    return doc, images


def refine(folder, *, fmax=NEB_FMAX, steps=NEB_STEPS, relax_fmax=RELAX_FMAX,
           relax_steps=RELAX_STEPS, threads=1, write=True, log=None) -> dict:
    """Relax the end points and run a climbing-image NEB from hopmap's images.

    Returns the ``hopmap.mlip/1`` document (also written to ``FOLDER/mlip.json`` with the
    relaxed band in ``FOLDER/mlip_images.xyz`` unless ``write=False``).
    """
    import numpy as np
    from ase.mep import NEB
    from ase.optimize import BFGS, FIRE

    warnings.filterwarnings("ignore")
    log = log or (lambda *_: None)
    t0 = time.time()
    folder = Path(folder)
    doc, images = read_folder(folder)
    m = int(doc.get("moving_atom_index", 0))
    cell = np.array(images[0].cell)
    # the moving ion's positions, unwrapped along the band
    path = [images[0].positions[m].copy()]
    for im in images[1:]:
        path.append(path[-1] + _mic(im.positions[m] - path[-1], cell))
    path = np.array(path)

    def relax(atoms):
        atoms.calc = _calculator(threads)
        opt = BFGS(atoms, logfile=None, maxstep=0.1)
        conv = bool(opt.run(fmax=relax_fmax, steps=relax_steps))
        return float(atoms.get_potential_energy()), conv, opt.nsteps

    def away(p, q, seed):
        v = p - q
        v = v / max(np.linalg.norm(v), 1e-9) + 0.5 * _kick(seed) / KICK_A
        return KICK_A * v / np.linalg.norm(v)

    start = images[0].copy()
    end = images[-1].copy()
    start.positions[m] = path[0] + away(path[0], path[1], 1)
    end.positions[m] = path[-1] + away(path[-1], path[-2], 2)
    e0, c0, n0 = relax(start)
    e1, c1, n1 = relax(end)
    t_relax = time.time() - t0
    log(f"end points relaxed in {t_relax:.0f} s: {e0:.4f} / {e1:.4f} eV")
    notes = []
    if not (c0 and c1):
        notes.append("an end point did not reach the force threshold within the step cap")
    # the relaxed end points, unwrapped next to the path's ends
    d0 = _mic(start.positions[m] - path[0], cell)
    d1 = _mic(end.positions[m] - path[-1], cell)
    mv0, mv1 = float(np.linalg.norm(d0)), float(np.linalg.norm(d1))
    for name, mv in (("start", mv0), ("end", mv1)):
        if mv > 0.7:
            notes.append(f"the {name} ion slid {mv:.2f} A in relaxation: hopmap's end site is "
                         "not a minimum of the potential")
    if np.linalg.norm(path[-1] + d1 - path[0] - d0) < 0.3:
        raise MlipError(f"{folder}: both end points relax into one site; no band to run")
    # the other atoms of the end points, unwrapped onto each other
    others = end.positions - start.positions
    for i in range(len(start)):
        others[i] = _mic(others[i], cell)
    seg = np.linalg.norm(np.diff(path, axis=0), axis=1)
    s = np.concatenate([[0.0], np.cumsum(seg)]) / max(seg.sum(), 1e-12)
    band = [start]
    for k in range(1, len(images) - 1):
        im = start.copy()
        im.positions = start.positions + s[k] * others
        im.positions[m] = path[k] + (1 - s[k]) * d0 + s[k] * d1
        im.calc = _calculator(threads)
        band.append(im)
    end_band = start.copy()
    end_band.positions = start.positions + others
    end_band.positions[m] = path[-1] + d1
    band.append(end_band)
    for im in (band[0], band[-1]):
        im.calc = _calculator(threads)
    neb = NEB(band, k=SPRING, climb=True, method="improvedtangent")
    opt = FIRE(neb, logfile=None)
    conv = bool(opt.run(fmax=fmax, steps=steps))
    residual = float(neb.get_residual())
    energies = [e0] + [float(im.get_potential_energy()) for im in band[1:-1]] + [e1]
    low = min(e0, e1)
    top = int(np.argmax(energies))
    barrier = max(energies) - low
    if not conv:
        notes.append(f"NEB not converged in {steps} steps (largest force {residual:.3f} eV/A)")
    if top in (0, len(energies) - 1):
        notes.append("highest energy at an end point: no barrier between the relaxed ends")
    arc = [0.0]
    for a, b in zip(band[:-1], band[1:]):
        arc.append(arc[-1] + float(np.linalg.norm(b.positions[m] - a.positions[m])))
    wall = time.time() - t0
    model = _model(threads)
    try:
        from importlib.metadata import version

        chgnet_version, ase_version = version("chgnet"), version("ase")
    except Exception:
        chgnet_version = ase_version = "?"
    result = {
        "schema": SCHEMA,
        "folder": str(folder),
        "file": doc.get("file"),
        "ion": doc.get("ion"),
        "mode": doc.get("mode"),
        "model": f"CHGNet {model.version} via chgnet {chgnet_version}",
        "ase_version": ase_version,
        "method": "climbing-image NEB (ASE, improved tangent), FIRE; end points relaxed with BFGS, fixed cell",
        "fmax_ev_a": fmax,
        "barrier_ev": round(barrier, 4),
        "barrier_forward_ev": round(max(energies) - e0, 4),
        "barrier_backward_ev": round(max(energies) - e1, 4),
        "bias_note": "universal machine-learned potentials read migration barriers low, typically by about 0.1 eV",
        "start_energy_ev": round(e0, 5),
        "end_energy_ev": round(e1, 5),
        "end_points_moved_a": [round(mv0, 3), round(mv1, 3)],
        "converged": conv,
        "max_force_ev_a": round(residual, 4),
        "neb_steps": opt.nsteps,
        "relax_steps": [n0, n1],
        "atoms": len(start),
        "images": [
            {"index": k, "arc_a": round(a, 4), "energy_ev": round(e - low, 5),
             "moving_ion_cart_a": [round(float(x), 5) for x in band[k].positions[m]]}
            for k, (a, e) in enumerate(zip(arc, energies))
        ],
        "bv": {
            "barrier_ev": doc.get("bv_barrier_ev"),
            "barrier_uncertainty_ev": doc.get("bv_barrier_uncertainty_ev"),
            "images": [{"index": i["index"], "arc_a": i["arc_a"], "energy_ev": i["bv_relative_ev"]}
                       for i in doc.get("images", [])],
        },
        "wall_s": round(wall, 1),
        "threads": threads,
        "notes": notes,
    }
    log(f"barrier {barrier:.3f} eV (bond valence {doc.get('bv_barrier_ev')} eV); "
        f"{'converged' if conv else 'NOT converged'} after {opt.nsteps} steps; {wall:.0f} s")
    if write:
        from ase.io import write as ase_write

        buf = io.StringIO()
        for im in band:
            im.info = {}
            ase_write(buf, im, format="extxyz")
        _write_atomic(folder / "mlip_images.xyz", buf.getvalue())
        _write_atomic(folder / "mlip.json", json.dumps(result, indent=2) + "\n")
    return result


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(
        prog="python -m hopmap.mlip",
        description="Machine-learned second opinion (CHGNet, climbing-image NEB) on a folder "
                    "written by `hopmap neb`; writes mlip.json and mlip_images.xyz into it.")
    ap.add_argument("folder")
    ap.add_argument("--steps", type=int, default=NEB_STEPS, help="NEB step cap")
    ap.add_argument("--fmax", type=float, default=NEB_FMAX, help="NEB force threshold, eV/A")
    ap.add_argument("--threads", type=int, default=1, help="CPU threads for the model")
    args = ap.parse_args(argv)
    try:
        r = refine(args.folder, fmax=args.fmax, steps=args.steps, threads=args.threads,
                   log=lambda s: print(s, file=sys.stderr))
    except MlipError as e:
        print(f"hopmap.mlip: error: {e}", file=sys.stderr)
        return 1
    print(f"{r['file']}: {r['ion']} barrier {r['barrier_ev']:.2f} eV by {r['model']} "
          f"(climbing-image NEB, {'converged' if r['converged'] else 'NOT converged'}, "
          f"{r['wall_s']:.0f} s); bond valence {r['bv']['barrier_ev']:.2f} ± "
          f"{r['bv']['barrier_uncertainty_ev']:.2f} eV")
    return 0


if __name__ == "__main__":
    sys.exit(main())

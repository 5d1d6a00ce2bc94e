#!/usr/bin/env python3
"""CI check of the machine-learned second opinion (crates/hopmap-python/python/hopmap/mlip.py).

Needs an interpreter with chgnet and ase (tools/oracle/requirements.txt). Loads mlip.py from
its file, on its own (no compiled hopmap module needed), and runs it on folders written by
`hopmap neb`:

- small case (default, about 2-4 min on one thread): Li in rutile TiO2 along c, interstitial,
  2x2x3 supercell (73 atoms, `--min-image-distance 8`). The relaxed start point's total energy
  must equal the oracle's stored value (tools/oracle/results.csv, the same supercell and
  model) within 0.005 eV, which catches a change of model, model version or structure; the
  barrier must be within 0.05 eV of the stored oracle barrier (the oracle started its band from
  the raw voxel path, this one from hopmap's smoothed images: on a channel this flat the two
  converged bands differ by about 0.02 eV, measured 0.027 vs 0.003 eV) and below 0.1 eV (DFT puts the
  c-axis hop of rutile at a few hundredths of an eV; from memory, science notes section 6);
  the band must converge; `hopmap neb --mlip-result` must print the barrier beside hopmap's.
- `--olivine` (about 4-10 min): LiFePO4, the default command (vacancy hop along b, 111 atoms).
  The barrier must lie within 0.15 eV of the published DFT-NEB value, 0.27 eV (GGA+U; Morgan,
  Van der Ven & Ceder, Electrochem. Solid-State Lett. 7 (2004) A30).

Exit 0 when every check passes, 1 otherwise.
"""

from __future__ import annotations

import argparse
import csv
import importlib.util
import json
import os
import subprocess
import sys
import tempfile
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")

REPO = Path(__file__).resolve().parent.parent
REF = REPO / "structures" / "reference"
MLIP = REPO / "crates" / "hopmap-python" / "python" / "hopmap" / "mlip.py"
STORED = REPO / "tools" / "oracle" / "results.csv"
OLIVINE_DFT_EV = 0.27  # Morgan, Van der Ven & Ceder 2004, GGA+U NEB
OLIVINE_TOL_EV = 0.15

failures = []


def check(ok, text):
    print(f"check_mlip: {'ok    ' if ok else 'FAILED'} {text}", flush=True)
    if not ok:
        failures.append(text)


def load_mlip():
    spec = importlib.util.spec_from_file_location("hopmap_mlip", MLIP)
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def stored_row(file, ion):
    with open(STORED, newline="") as f:
        return next(r for r in csv.DictReader(f) if r["file"] == file and r["ion"] == ion)


def neb(binary, cif, out, *extra):
    return subprocess.run([binary, "neb", str(cif), "--ion", "Li", "--out", str(out), "-q",
                           *extra], check=True, capture_output=True, text=True).stdout


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--hopmap", default=os.environ.get("HOPMAP_BIN",
                                                       str(REPO / "target/release/hopmap")))
    ap.add_argument("--olivine", action="store_true",
                    help="also the LiFePO4 hop against the published DFT barrier (slow)")
    ap.add_argument("--skip-small", action="store_true")
    args = ap.parse_args()
    mlip = load_mlip()
    if not mlip.available():
        print("check_mlip: chgnet or ase missing in this interpreter: "
              "pip install -r tools/oracle/requirements.txt", file=sys.stderr)
        return 1
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        if not args.skip_small:
            out = tmp / "rutile"
            neb(args.hopmap, REF / "TiO2_rutile.cif", out, "--min-image-distance", "8")
            r = mlip.refine(out, log=lambda s: print(f"  {s}", flush=True))
            row = stored_row("TiO2_rutile.cif", "Li")
            check(r["schema"] == "hopmap.mlip/1" and (out / "mlip.json").exists()
                  and (out / "mlip_images.xyz").exists(), "mlip.json and mlip_images.xyz written")
            check(r["atoms"] == int(row["atoms"]) and r["mode"] == row["mode"],
                  f"{r['atoms']} atoms, {r['mode']} mode, as the stored oracle row")
            e0, want = r["start_energy_ev"], float(row["start_energy_ev"])
            check(abs(e0 - want) <= 0.005,
                  f"relaxed start {e0:.4f} eV vs stored {want:.4f} eV (tolerance 0.005 eV)")
            b, bw = r["barrier_ev"], float(row["barrier_ev"])
            check(abs(b - bw) <= 0.05 and b < 0.1,
                  f"barrier {b:.4f} eV vs stored {bw:.4f} eV (tolerance 0.05 eV; below 0.1 eV)")
            check(r["converged"], f"NEB converged (largest force {r['max_force_ev_a']} eV/A, "
                                  f"{r['neb_steps']} steps, {r['wall_s']} s)")
            text = neb(args.hopmap, REF / "TiO2_rutile.cif", out, "--min-image-distance", "8",
                       "--mlip-result", str(out / "mlip.json"))
            check("machine-learned potential" in text and "bond valence" in text,
                  "hopmap neb --mlip-result prints both barriers")
            doc = json.loads((out / "neb.json").read_text())
            check(doc["mlip"]["barrier_ev"] == r["barrier_ev"], "neb.json carries the result")
        if args.olivine:
            out = tmp / "olivine"
            neb(args.hopmap, REF / "LiFePO4_olivine.cif", out)
            r = mlip.refine(out, log=lambda s: print(f"  {s}", flush=True))
            b = r["barrier_ev"]
            check(abs(b - OLIVINE_DFT_EV) <= OLIVINE_TOL_EV and r["converged"],
                  f"LiFePO4 along b: {b:.3f} eV (CHGNet) vs {OLIVINE_DFT_EV} eV (DFT-NEB, Morgan "
                  f"et al. 2004), tolerance {OLIVINE_TOL_EV} eV; bond valence "
                  f"{r['bv']['barrier_ev']:.3f} eV; {r['wall_s']} s")
    print(f"check_mlip: {'FAILED: ' + str(len(failures)) if failures else 'all passed'}")
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main())

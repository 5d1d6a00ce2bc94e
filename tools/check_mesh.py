#!/usr/bin/env python3
"""Cross-check of `hopmap paths --mesh`: the surfaces read back with trimesh, the atoms with ASE.

For olivine LiFePO4 (Streltsov et al., Acta Cryst. B49 (1993) 147; lithium in 1D tunnels along
b, two per cell) and layered LiCoO2 (Orman & Wiseman, Acta Cryst. C40 (1984) 12; lithium in 2D
layers perpendicular to c, three per hexagonal cell), this runs hopmap, then with trimesh (a
general-purpose mesh library from PyPI, not ours):

- every PLY surface and every mesh of the glTF binary loads, is watertight and has consistent
  winding; its volume is positive (outward normals) and equals the manifest's to float precision;
- the volume per cell is the grid's accessible volume (fraction x cell volume) within the
  tolerance hopmap's tests state for this spacing;
- every vertex lies in the block the manifest names;
- the lowest network splits into the expected bodies: olivine 2 x 2 x 2 cells -> 8 tubes each
  running the whole block along b; LiCoO2 2 x 2 x 1 -> 3 sheets each spanning a and b
  (pieces under 5 % of the largest body's volume are slivers where the block's faces cut a
  channel, and are not counted);

and reads atoms.xyz with ASE's extended XYZ reader.

    python tools/check_mesh.py --hopmap target/release/hopmap
"""

import argparse
import json
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np
import trimesh

ROOT = Path(__file__).resolve().parent.parent
SPACING = 0.15
# mesh volume against the grid's accessible volume at 0.15 A (hopmap's tests: 16 % at 0.2 A,
# 6 % at 0.1 A; the surface follows the linear interpolant and encloses a little less)
VOLUME_TOLERANCE = 0.12

CASES = [
    # file, cells, expected main bodies of the lowest network, axis they span (0 a, 1 b, 2 c)
    ("LiFePO4_olivine.cif", [2, 2, 2], 8, [1]),
    ("LiCoO2_layered.cif", [2, 2, 1], 3, [0, 1]),
]

failures = []


def check(cond, what):
    if not cond:
        failures.append(what)
        print(f"  FAIL {what}", file=sys.stderr)
    return cond


def frac_in_block(vertices, manifest):
    vectors = np.array(manifest["block_vectors_a"])  # rows: block edges
    origin = np.array(manifest["block_origin_a"])
    return np.linalg.solve(vectors.T, (vertices - origin).T).T


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--hopmap", default=str(ROOT / "target/release/hopmap"))
    args = ap.parse_args()
    print(f"trimesh {trimesh.__version__}")
    print(f"{'structure':<22}{'net':>4}{'level_ev':>10}{'triangles':>10}{'V_mesh/cell':>13}"
          f"{'V_grid/cell':>13}{'diff':>8}{'bodies':>8}")
    with tempfile.TemporaryDirectory() as tmp:
        for name, cells, bodies_expected, span_axes in CASES:
            out = Path(tmp) / name
            cmd = [args.hopmap, "paths", str(ROOT / "structures/reference" / name), "--ion", "Li",
                   "--spacing", str(SPACING), "--quiet", "--mesh", str(out),
                   "--mesh-cells", ",".join(map(str, cells))]
            subprocess.run(cmd, check=True, stdout=subprocess.DEVNULL)
            manifest = json.loads((out / "mesh.json").read_text())
            check(manifest["schema"] == "hopmap.mesh/1", f"{name}: schema")
            ncells = cells[0] * cells[1] * cells[2]
            scene = trimesh.load(out / "networks.glb", force="scene")
            geoms = list(scene.geometry.values())
            check(len(geoms) == len(manifest["networks"]),
                  f"{name}: {len(geoms)} meshes in the glb for {len(manifest['networks'])} networks")
            for k, net in enumerate(manifest["networks"]):
                ply = trimesh.load(out / net["ply"], process=False)
                tag = f"{name} {net['dimension']}D"
                check(ply.is_watertight, f"{tag}: PLY watertight")
                check(ply.is_winding_consistent, f"{tag}: PLY winding consistent")
                check(len(ply.faces) == net["triangles"], f"{tag}: PLY triangle count")
                v = ply.volume
                check(v > 0, f"{tag}: positive volume (outward normals)")
                check(abs(v - net["enclosed_volume_a3"]) <= 1e-4 * abs(net["enclosed_volume_a3"]),
                      f"{tag}: PLY volume {v:.4f} against the manifest's {net['enclosed_volume_a3']}")
                per_cell = v / ncells
                grid = net["accessible_volume_per_cell_a3"]
                diff = (per_cell - grid) / grid
                check(abs(diff) < VOLUME_TOLERANCE,
                      f"{tag}: volume per cell {per_cell:.3f} A^3 against the grid's {grid:.3f} A^3")
                f = frac_in_block(np.asarray(ply.vertices), manifest)
                check(f.min() > -0.01 and f.max() < 1.01, f"{tag}: vertices inside the block")
                glb = geoms[k] if k < len(geoms) else None
                if check(glb is not None, f"{tag}: mesh in the glb"):
                    check(glb.is_watertight, f"{tag}: glb mesh watertight")
                    check(abs(glb.volume - v) <= 1e-4 * abs(v), f"{tag}: glb volume equals PLY's")
                nbodies = "-"
                if k == 0:
                    parts = ply.split(only_watertight=False)
                    largest = max(p.volume for p in parts)
                    main_parts = [p for p in parts if p.volume >= 0.05 * largest]
                    nbodies = len(main_parts)
                    check(nbodies == bodies_expected,
                          f"{tag}: {nbodies} bodies, {bodies_expected} expected")
                    check(nbodies == net["main_components"], f"{tag}: bodies as the manifest says")
                    for p in main_parts:
                        ext = np.ptp(frac_in_block(np.asarray(p.vertices), manifest), axis=0)
                        for ax in span_axes:
                            check(ext[ax] > 0.99, f"{tag}: a body spans the block along axis {ax}")
                        for ax in set(range(3)) - set(span_axes):
                            check(ext[ax] < 0.5, f"{tag}: a body stays narrow along axis {ax}")
                print(f"{name:<22}{net['dimension']:>3}D{net['level_ev']:>10.3f}{len(ply.faces):>10}"
                      f"{per_cell:>13.3f}{grid:>13.3f}{100 * diff:>+7.1f}%{nbodies:>8}")
            try:
                import ase.io
                atoms = ase.io.read(out / "atoms.xyz", format="extxyz")
                check(len(atoms) > 0 and "Li" in atoms.get_chemical_symbols(),
                      f"{name}: atoms.xyz read by ASE with Li")
            except ImportError:
                print("  (ASE not installed: atoms.xyz not read back)")
    if failures:
        print(f"check_mesh: {len(failures)} failures", file=sys.stderr)
        return 1
    print("check_mesh: OK")
    return 0


if __name__ == "__main__":
    sys.exit(main())

"""hopmap from Python: screen the five model frameworks of the demo study for Li+ and Na+.

The frameworks QF-1 ... QF-5 are invented for the demo (structures/demo/README.md): the
fictional Quillfeather Group compares open oxide frameworks for a fast-charging anode.

    pip install ./crates/hopmap-python          # from the repository root
    python examples/python_quickstart.py        # prints a table, writes one report

Numbers are screening estimates from a bond-valence model, not cell design.
"""

from pathlib import Path

import hopmap

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "structures" / "demo"

print(f"{'framework':<28} {'ion':<3} {'answer'}")
best = None
for cif in sorted(DEMO.glob("QF*.cif")):
    for ion in ("Li", "Na"):
        r = hopmap.analyse(cif, ion=ion, spacing=0.2)
        nets = r.to_dict()["networks"]
        print(f"{cif.stem:<28} {ion:<3} {r.answer}")
        if nets and (best is None or nets[0]["barrier_ev"] < best[0]):
            best = (nets[0]["barrier_ev"], cif, ion, r)

barrier, cif, ion, r = best
grid = r.energy_grid()
print(f"\nlowest barrier: {cif.stem} for {ion}, {barrier:.2f} eV; energy grid {grid.shape}, "
      f"{(grid < grid.min() + barrier).mean():.1%} of the cell below the opening")
out = Path("hopmap-python-example.html")
r.write_report(out)
print(f"report written to {out}")

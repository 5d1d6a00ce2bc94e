"""Tests of the Python package against the command line (the same answer and the same JSON),
against the published structures it reads (sites where the file puts the ion), and against
pymatgen and ASE as independent readers of the same files.

Run from the repository root: `python -m pytest crates/hopmap-python/tests` (after
`pip install ./crates/hopmap-python`); the command line is taken from $HOPMAP_BIN, else
target/release/hopmap.
"""

from __future__ import annotations

import csv
import json
import os
import subprocess
import threading
import time
from pathlib import Path

import numpy as np
import pytest

import hopmap

ROOT = Path(__file__).resolve().parents[3]
REFS = ROOT / "structures" / "reference"
BIN = Path(os.environ.get("HOPMAP_BIN", ROOT / "target" / "release" / "hopmap"))
OLIVINE = REFS / "LiFePO4_olivine.cif"  # Streltsov et al., Acta Cryst. B49 (1993) 147
# Parity runs at a coarse grid: the same options go to both sides, so the documents must agree.
SPACING = 0.3


def cli_json(path: Path, ion: str, *extra: str) -> dict:
    out = subprocess.run(
        [str(BIN), "paths", str(path), "--ion", ion, "--json", "-q", *extra],
        check=True,
        capture_output=True,
        text=True,
    ).stdout
    return json.loads(out)


def without_timings(d: dict) -> dict:
    d = dict(d)
    d.pop("timings_s", None)
    return d


def reference_rows():
    with open(REFS / "references.csv", newline="") as f:
        return [(r["file"], r["ion"]) for r in csv.DictReader(f)]


@pytest.mark.skipif(not BIN.exists(), reason="the command line is not built")
@pytest.mark.parametrize("file,ion", reference_rows())
def test_to_dict_equals_cli_json_on_the_reference_set(file, ion):
    path = REFS / file
    rel = os.path.relpath(path)
    r = hopmap.analyse(rel, ion=ion, spacing=SPACING)
    assert without_timings(r.to_dict()) == without_timings(cli_json(Path(rel), ion, "--spacing", str(SPACING)))


@pytest.mark.skipif(not BIN.exists(), reason="the command line is not built")
def test_answer_is_the_cli_headline():
    r = hopmap.analyse(str(OLIVINE), ion="Li")
    text = subprocess.run(
        [str(BIN), "paths", str(OLIVINE), "--ion", "Li", "-q"], check=True, capture_output=True, text=True
    ).stdout
    assert text.splitlines()[0] == r.answer
    # olivine: Li runs in 1D channels along b (Morgan, Van der Ven & Ceder 2004; Islam et al. 2005)
    assert r.answer.startswith("Li: 1D channels along [010]")


def test_grids_are_numpy_arrays_in_cell_order():
    r = hopmap.analyse(str(OLIVINE), ion="Li", spacing=0.2)
    d = r.to_dict()
    e = r.energy_grid()
    assert isinstance(e, np.ndarray) and e.dtype == np.float32
    assert list(e.shape) == d["grid"]["dims"]
    assert r.mismatch_grid().shape == e.shape
    # the lowest site is the lowest grid point (sites are refined minima of this grid)
    s = r.sites()
    assert abs(float(s["energy_ev"][0]) - float(e.min())) < 1e-5
    # and the grid point at the site's position is (near) that minimum
    na, nb, nc = e.shape
    f = s["frac"][0] % 1.0
    i, j, k = (int(round(f[0] * na)) % na, int(round(f[1] * nb)) % nb, int(round(f[2] * nc)) % nc)
    assert e[i, j, k] - e.min() < 0.05
    lat = r.lattice()
    assert lat.shape == (3, 3)
    # Pnma olivine: a = 10.3320 A (Streltsov et al. 1993)
    assert abs(np.linalg.norm(lat[0]) - 10.332) < 0.01


def test_sites_sit_where_the_published_structure_puts_li():
    pymatgen = pytest.importorskip("pymatgen.core")
    r = hopmap.analyse(str(OLIVINE), ion="Li")
    placed = r.structure_with_ion("lowest")
    published = pymatgen.Structure.from_file(str(OLIVINE))  # pymatgen's own CIF reader
    li_pub = [s for s in published if s.specie.symbol == "Li"]
    li_placed = [s for s in placed if "Li" in s.species_string]
    assert len(li_placed) == len(li_pub) == 4  # Li on 4a, Z = 4
    for s in li_placed:
        d = min(s.distance(p) for p in li_pub)
        assert d < 0.15, d
        assert np.isfinite(s.properties["site_energy_ev"])
    # the framework keeps its composition: Fe4 P4 O16
    comp = placed.composition.element_composition
    assert comp["Fe"] == 4 and comp["P"] == 4 and comp["O"] == 16


def test_pymatgen_and_ase_inputs_give_the_file_answer():
    pymatgen = pytest.importorskip("pymatgen.core")
    ase_io = pytest.importorskip("ase.io")
    ref = hopmap.analyse(str(OLIVINE), ion="Li", spacing=0.2).to_dict()["networks"][0]
    for obj in (pymatgen.Structure.from_file(str(OLIVINE)), ase_io.read(str(OLIVINE))):
        net = hopmap.analyse(obj, ion="Li", spacing=0.2).to_dict()["networks"][0]
        assert net["dimension"] == ref["dimension"] == 1
        assert net["directions"] == ref["directions"]
        assert abs(net["barrier_ev"] - ref["barrier_ev"]) < 0.02


def test_text_input_matches_file_input():
    text = OLIVINE.read_text()
    a = hopmap.analyse_text(text, "cif", ion="Li", name="olivine.cif", spacing=0.3)
    b = hopmap.analyse(str(OLIVINE), ion="Li", spacing=0.3)
    assert a.answer == b.answer


def test_errors_name_file_and_place(tmp_path):
    bad = tmp_path / "bad.cif"
    bad.write_text("data_x\n_cell_length_a 5\nloop_\n_atom_site_label\n_atom_site_fract_x\n'Li1 0.5\n")
    with pytest.raises(hopmap.InputError) as e:
        hopmap.analyse(str(bad))
    assert e.value.file == str(bad)
    assert e.value.place is not None and "line" in e.value.place
    with pytest.raises(hopmap.InputError) as e:
        hopmap.analyse(str(tmp_path / "missing.cif"))
    assert "missing.cif" in str(e.value)
    with pytest.raises(hopmap.OptionsError) as e:
        hopmap.analyse(str(OLIVINE), spacing=0.0)
    assert e.value.place == "spacing"
    with pytest.raises(hopmap.OptionsError) as e:
        hopmap.analyse(str(OLIVINE), ion="Qq")
    assert e.value.place == "ion"
    with pytest.raises(TypeError):
        hopmap.analyse(42)


def test_progress_callback_can_cancel():
    calls = []

    def progress(stage, done, total):
        calls.append((stage, done, total))
        return False

    with pytest.raises(hopmap.Cancelled):
        hopmap.analyse(str(OLIVINE), progress=progress)
    assert calls and calls[0][2] > 0


def test_the_interpreter_lock_is_released_during_the_analysis():
    ticks = 0
    stop = threading.Event()

    def count():
        nonlocal ticks
        while not stop.is_set():
            ticks += 1
            time.sleep(0.001)

    t = threading.Thread(target=count)
    t.start()
    before = ticks
    start = time.perf_counter()
    hopmap.analyse(str(OLIVINE), ion="Li", spacing=0.1)
    elapsed = time.perf_counter() - start
    after = ticks
    stop.set()
    t.join()
    # a thread that sleeps 1 ms per tick runs freely only if the lock is released: expect at
    # least a tenth of the ticks it would make in the elapsed time
    assert after - before > 0.1 * elapsed / 0.0011, (after - before, elapsed)


def test_repr_html_shows_answer_and_figures():
    r = hopmap.analyse(str(OLIVINE), ion="Li", spacing=0.2)
    h = r._repr_html_()
    assert r.answer.split(",")[0] in h
    assert "<svg" in h
    assert "not cell design" in h

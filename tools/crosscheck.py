#!/usr/bin/env python3
"""Cross-check of hopmap's CIF reading against independent libraries from PyPI.

For every CIF under structures/ (recursive) and ../shared/cif-corpus/ (when present), or under
the directories given with --root:

(a) syntax: does hopmap read the file? (`hopmap inspect --json --keep-cell FILE`: exit 0 =
    structure read,
    1 = error with a message; anything else, a timeout or unreadable JSON is a crash) against
    gemmi (gemmi.cif.read_file) and PyCifRW (CifFile.ReadCif). With --syntax-args, a second
    hopmap command gives a document-only verdict (e.g. `--syntax-args "check --json"`).
(b) the expanded structure, when hopmap reads one: the number of distinct positions in the cell,
    the occupancy-weighted composition of the cell and the cell volume, against pymatgen's
    CifParser (parse_structures(primitive=False); composition from structure.composition).
    Tolerances: volume 1e-3 relative, composition 1e-2 absolute, positions exact. When pymatgen
    refuses a file for occupancies above 1 (which hopmap reads with a warning), it is parsed
    again with a large occupancy tolerance and the positions and volume are compared.

Verdicts: agree, DISAGREE, known (listed with a reason in tools/crosscheck_known.tsv, columns
file, check, reason: one row per file and check, no patterns), info (nothing to compare: an
oracle failed where hopmap succeeded, the oracles disagree among themselves, or pymatgen had to
scale overfull occupancies down, which leaves the composition not comparable).

The table goes to --out (default target/crosscheck.tsv), a summary to stdout. The exit status
is 1 when a disagreement is not listed as known, or a known row of a file checked in this run
no longer disagrees (stale), 0 otherwise (2 for a usage problem).

The hopmap binary comes from --hopmap, else $HOPMAP_BIN, else target/release/hopmap. The value
`fake:gemmi` stands in for hopmap with gemmi's small-structure reader (gemmi.read_small_structure),
which exercises this script end to end and doubles as a comparison of two oracles.

Python packages: see tools/requirements.txt.
"""

import argparse
import concurrent.futures as cf
import contextlib
import io
import json
import math
import os
import signal
import subprocess
import sys
import time
import warnings
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
VOLUME_REL_TOL = 1e-3
COMPOSITION_ABS_TOL = 1e-2


class Timeout(Exception):
    pass


@contextlib.contextmanager
def time_limit(seconds):
    """Raises Timeout in this (worker) process after `seconds`; Unix only, no-op elsewhere."""
    if not hasattr(signal, "SIGALRM"):
        yield
        return

    def handler(signum, frame):
        raise Timeout(f"no answer within {seconds} s")

    old = signal.signal(signal.SIGALRM, handler)
    signal.alarm(seconds)
    try:
        yield
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, old)


def one_line(text, limit=160):
    text = " ".join(str(text).split())
    return text if len(text) <= limit else text[: limit - 3] + "..."


# ---------------------------------------------------------------------------------------------
# hopmap side


def run_hopmap(binary, path, timeout, extra_args=None):
    """{'status': 'ok'|'error'|'crash', 'json': dict|None, 'message': str}."""
    if binary.startswith("fake:"):
        return fake_hopmap(path)
    # --keep-cell: a P 1 file stays in its own cell (by default hopmap rewrites it in the
    # conventional cell of the symmetry it finds), so that positions and volume compare with
    # the oracle's reading of the file as written
    args = [binary] + (extra_args if extra_args is not None else ["inspect", "--json", "--keep-cell"]) + [str(path)]
    try:
        p = subprocess.run(args, capture_output=True, timeout=timeout)
    except subprocess.TimeoutExpired:
        return {"status": "crash", "json": None, "message": f"timeout after {timeout} s"}
    except OSError as e:
        return {"status": "crash", "json": None, "message": f"cannot run {binary}: {e}"}
    out = p.stdout.decode("utf-8", "replace")
    err = p.stderr.decode("utf-8", "replace")
    if p.returncode == 0:
        if extra_args is not None:
            return {"status": "ok", "json": None, "message": ""}
        try:
            return {"status": "ok", "json": json.loads(out), "message": ""}
        except ValueError as e:
            return {"status": "crash", "json": None, "message": f"exit 0 but not JSON: {e}"}
    if p.returncode == 1:
        return {"status": "error", "json": None, "message": one_line(err or out)}
    return {
        "status": "crash",
        "json": None,
        "message": one_line(f"exit status {p.returncode}: {err or out}"),
    }


def fake_hopmap(path):
    """hopmap's JSON fields computed by gemmi's small-structure reader."""
    import gemmi

    try:
        ss = gemmi.read_small_structure(str(path))
    except Exception as e:  # noqa: BLE001 - any failure is an input error here
        return {"status": "error", "json": None, "message": one_line(e)}
    if not ss.sites:
        return {"status": "error", "json": None, "message": "no atom sites"}
    sites = ss.get_all_unit_cell_sites()
    comp = {}
    buckets = {}  # positions hashed by rounded fractional coordinates, 1/100 of a cell edge
    npos = 0

    def close(f, q):
        d = [x - y - round(x - y) for x, y in zip(f, q)]
        return ss.cell.orthogonalize(gemmi.Fractional(*d)).length() < 0.05

    for s in sites:
        f = (s.fract.x % 1.0, s.fract.y % 1.0, s.fract.z % 1.0)
        if not all(math.isfinite(x) for x in f):
            return {"status": "error", "json": None, "message": f"site {s.label} has no position"}
        comp[s.element.name] = comp.get(s.element.name, 0.0) + s.occ
        key = tuple(int(x * 100) for x in f)
        near = [((key[0] + i) % 100, (key[1] + j) % 100, (key[2] + k) % 100)
                for i in (-1, 0, 1) for j in (-1, 0, 1) for k in (-1, 0, 1)]
        if not any(close(f, q) for b in near for q in buckets.get(b, ())):
            buckets.setdefault(key, []).append(f)
            npos += 1
    c = ss.cell
    return {
        "status": "ok",
        "json": {
            "file": str(path),
            "block": ss.name,
            "cell": {"a": c.a, "b": c.b, "c": c.c, "alpha": c.alpha, "beta": c.beta,
                     "gamma": c.gamma, "volume": c.volume},
            "positions_in_cell": npos,
            "composition": comp,
        },
        "message": "",
    }


# ---------------------------------------------------------------------------------------------
# oracle side


def gemmi_syntax(path):
    import gemmi

    try:
        doc = gemmi.cif.read_file(str(path))
        return {"ok": True, "blocks": [b.name for b in doc], "message": ""}
    except Exception as e:  # noqa: BLE001
        return {"ok": False, "blocks": [], "message": one_line(e)}


def pycifrw_syntax(path, timeout):
    try:
        from CifFile import ReadCif
    except ImportError:
        return {"ok": None, "message": "PyCifRW not installed"}
    sink = io.StringIO()
    try:
        with time_limit(timeout), contextlib.redirect_stdout(sink), contextlib.redirect_stderr(sink):
            ReadCif(str(path))
        return {"ok": True, "message": ""}
    except Timeout as e:
        return {"ok": None, "message": f"PyCifRW: {e}"}
    except Exception as e:  # noqa: BLE001
        return {"ok": False, "message": one_line(e)}


def block_text(path, block_name):
    """The CIF text of one data block of a multi-block file, through gemmi."""
    import gemmi

    doc = gemmi.cif.read_file(str(path))
    for b in doc:
        if b.name == block_name:
            return "data_" + b.name + "\n" + b.as_string().split("\n", 1)[1]
    return None


# pymatgen refuses a position whose occupancies add up to more than 1 (its default
# occupancy_tolerance). hopmap reads such files with a warning, so the positions are compared
# after a second parse with this tolerance; pymatgen then scales the occupancies of those
# positions down to 1, so the composition is not comparable and is reported as info.
OVERFULL_RETRY_TOLERANCE = 100.0


def pymatgen_structure(path, block, blocks, timeout):
    """{'ok': bool, 'positions', 'composition', 'volume', 'rescaled', 'message'} for the named
    block; 'rescaled' is true when only the occupancy-tolerant second parse succeeded."""
    first = pymatgen_parse(path, block, blocks, timeout, None)
    if first["ok"] is False and "exceeded tolerance" in first["message"]:
        second = pymatgen_parse(path, block, blocks, timeout, OVERFULL_RETRY_TOLERANCE)
        if second["ok"]:
            second["rescaled"] = True
            second["message"] = ("occupancies above 1 scaled down to 1 by pymatgen ("
                                 + first["message"] + ")")
            return second
    return first


def pymatgen_parse(path, block, blocks, timeout, occupancy_tolerance):
    try:
        from pymatgen.io.cif import CifParser
    except ImportError:
        return {"ok": None, "message": "pymatgen not installed"}
    sink = io.StringIO()
    kwargs = {} if occupancy_tolerance is None else {"occupancy_tolerance": occupancy_tolerance}
    try:
        with time_limit(timeout), warnings.catch_warnings(), contextlib.redirect_stdout(sink), \
                contextlib.redirect_stderr(sink):
            warnings.simplefilter("ignore")
            if len(blocks) > 1 and block in blocks:
                text = block_text(path, block)
                parser = CifParser(io.StringIO(text), **kwargs)
            else:
                parser = CifParser(str(path), **kwargs)
            structs = parser.parse_structures(primitive=False, on_error="raise")
        if not structs:
            return {"ok": False, "message": "no structure"}
        s = structs[0]
        comp = {}
        for el, n in s.composition.element_composition.items():
            sym = getattr(el, "symbol", str(el))
            comp[sym] = comp.get(sym, 0.0) + float(n)
        return {
            "ok": True,
            "rescaled": False,
            "positions": len(s),
            "composition": comp,
            "volume": float(s.volume),
            "message": "" if len(structs) == 1 else f"{len(structs)} structures, first compared",
        }
    except Timeout as e:
        return {"ok": None, "message": f"pymatgen: {e}"}
    except Exception as e:  # noqa: BLE001
        return {"ok": False, "message": one_line(f"{type(e).__name__}: {e}")}


# ---------------------------------------------------------------------------------------------
# comparison of one file


def fmt_comp(c):
    return " ".join(f"{k}{v:.4g}" for k, v in sorted(c.items()) if abs(v) > 1e-9) or "(empty)"


def check_file(task):
    """All rows for one file; a failure of this script itself becomes a DISAGREE row."""
    try:
        return check_file_inner(task)
    except Exception as e:  # noqa: BLE001
        return [{"file": task[1], "check": "script", "hopmap": "",
                 "oracle": one_line(f"crosscheck.py failed: {type(e).__name__}: {e}"),
                 "verdict": "DISAGREE"}], 0.0


def check_file_inner(task):
    path, display, binary, timeout, syntax_args = task
    rows = []

    def row(check, hop, oracle, verdict):
        rows.append({"file": display, "check": check, "hopmap": one_line(hop, 120),
                     "oracle": one_line(oracle, 120), "verdict": verdict})

    t0 = time.time()
    hop = run_hopmap(binary, path, timeout)
    g = gemmi_syntax(path)
    c = pycifrw_syntax(path, timeout)

    # (a) syntax acceptance
    if hop["status"] == "crash":
        row("run", hop["message"], "hopmap must exit 0 or 1", "DISAGREE")
    doc = None
    if syntax_args:
        d = run_hopmap(binary, path, timeout, syntax_args)
        doc = {"ok": True, "error": False, "crash": None}.get(d["status"])
        if d["status"] == "crash":
            row("run-syntax", d["message"], "hopmap must exit 0 or 1", "DISAGREE")
    elif hop["status"] == "ok":
        doc = True
    oracle_ok = [v for v in (g["ok"], c["ok"]) if v is not None]
    oracle_text = (f"gemmi {'ok' if g['ok'] else 'rejects: ' + g['message']}; "
                   f"PyCifRW {'ok' if c['ok'] else ('rejects: ' if c['ok'] is False else '') + c['message']}")
    hop_text = {"ok": "reads a structure", "error": "error: " + hop["message"],
                "crash": "crash"}[hop["status"]]
    if oracle_ok and len(set(oracle_ok)) > 1:
        row("syntax", hop_text, oracle_text, "info")
    elif oracle_ok:
        accepted = oracle_ok[0]
        if doc is None:
            # an error without a document verdict: a valid file may simply hold no structure;
            # a syntax oracle's rejection agrees with any error
            verdict = "agree" if not accepted else "info"
        else:
            verdict = "agree" if doc == accepted else "DISAGREE"
        row("syntax", hop_text, oracle_text, verdict)

    # (b) the expanded structure
    block = (hop["json"] or {}).get("block")
    pm = pymatgen_structure(path, block, g["blocks"], timeout)
    pm_text = "reads a structure" if pm["ok"] else f"no structure: {pm['message']}"
    if hop["status"] == "ok" and not pm["ok"]:
        row("structure", hop_text, "pymatgen " + pm_text, "info")
    elif hop["status"] == "error" and pm["ok"]:
        row("structure", hop_text, "pymatgen " + pm_text, "DISAGREE")
    elif hop["status"] == "error":
        row("structure", hop_text, "pymatgen " + pm_text, "agree")
    if hop["status"] == "ok" and pm["ok"]:
        j = hop["json"]
        compare_structure(j, pm, row)
    return rows, time.time() - t0


# Isotopes counted as their element, as pymatgen does (deuterium in neutron structures).
ISOTOPES = {"D": "H", "T": "H"}


def compare_structure(j, pm, row):
    try:
        npos = int(j["positions_in_cell"])
        row("positions", str(npos), str(pm["positions"]),
            "agree" if npos == pm["positions"] else "DISAGREE")
    except (KeyError, TypeError, ValueError) as e:
        row("positions", f"missing in JSON: {e}", str(pm["positions"]), "DISAGREE")
    if pm.get("rescaled"):
        row("composition", fmt_comp_json(j), fmt_comp(pm["composition"]) + "; " + pm["message"],
            "info")
        compare_volume(j, pm, row)
        return
    try:
        comp = {}
        for k, v in j["composition"].items():
            k = ISOTOPES.get(str(k), str(k))
            comp[k] = comp.get(k, 0.0) + float(v)
        keys = set(comp) | set(pm["composition"])
        worst = max(abs(comp.get(k, 0.0) - pm["composition"].get(k, 0.0)) for k in keys)
        row("composition", fmt_comp(comp), fmt_comp(pm["composition"]),
            "agree" if worst <= COMPOSITION_ABS_TOL else "DISAGREE")
    except (KeyError, TypeError, ValueError, AttributeError) as e:
        row("composition", f"missing in JSON: {e}", fmt_comp(pm["composition"]), "DISAGREE")
    compare_volume(j, pm, row)


def fmt_comp_json(j):
    try:
        return fmt_comp({str(k): float(v) for k, v in j["composition"].items()})
    except (KeyError, TypeError, ValueError, AttributeError) as e:
        return f"missing in JSON: {e}"


def compare_volume(j, pm, row):
    try:
        v = float(j["cell"]["volume"])
        rel = abs(v - pm["volume"]) / pm["volume"]
        row("volume", f"{v:.4f} A^3", f"{pm['volume']:.4f} A^3",
            "agree" if rel <= VOLUME_REL_TOL and math.isfinite(v) else "DISAGREE")
    except (KeyError, TypeError, ValueError) as e:
        row("volume", f"missing in JSON: {e}", f"{pm['volume']:.4f} A^3", "DISAGREE")


# ---------------------------------------------------------------------------------------------
# driver


def find_cifs(roots):
    out = []
    for root in roots:
        root = Path(root)
        if not root.is_dir():
            continue
        base = root.resolve().parent
        for p in sorted(root.rglob("*")):
            if p.is_file() and p.suffix.lower() == ".cif":
                out.append((p, str(p.resolve().relative_to(base))))
    return out


CHECKS = ("run", "run-syntax", "syntax", "structure", "positions", "composition", "volume")


def read_known(path):
    """{(file, check): reason}. One row per file and check, each with its reason: no patterns,
    no `*` for every check of a file, so that each accepted difference was looked at."""
    known = {}
    if not path.exists():
        return known
    for n, line in enumerate(path.read_text().splitlines(), 1):
        if not line.strip() or line.startswith("#"):
            continue
        parts = line.split("\t")
        if n == 1 and parts[0].strip() == "file":
            continue  # header
        if len(parts) != 3 or not parts[2].strip():
            sys.exit(f"{path}:{n}: expected three tab-separated columns: file, check, reason")
        key = (parts[0].strip(), parts[1].strip())
        if key[1] not in CHECKS:
            sys.exit(f"{path}:{n}: check {key[1]!r} is not one of {', '.join(CHECKS)}")
        if any(c in key[0] for c in "*?["):
            sys.exit(f"{path}:{n}: {key[0]!r}: name one file per row, no patterns")
        if key in known:
            sys.exit(f"{path}:{n}: {key[0]} [{key[1]}] is listed twice")
        known[key] = parts[2].strip()
    return known


# Rock salt NaCl, F m -3 m, a = 5.6402 A, Na on 4a, Cl on 4b (handbook value, common practice).
NACL_CIF = """data_NaCl
_cell_length_a 5.6402
_cell_length_b 5.6402
_cell_length_c 5.6402
_cell_angle_alpha 90
_cell_angle_beta 90
_cell_angle_gamma 90
_symmetry_space_group_name_H-M 'F m -3 m'
loop_
_atom_site_label
_atom_site_type_symbol
_atom_site_fract_x
_atom_site_fract_y
_atom_site_fract_z
Na1 Na 0 0 0
Cl1 Cl 0.5 0.5 0.5
"""

STAND_IN = """#!{python}
import json, sys
sys.path.insert(0, {tools!r})
import crosscheck
path = sys.argv[-1]
if "broken" in path:
    print(path + ":2:17: the quoted value is not closed", file=sys.stderr)
    sys.exit(1)
if "panic" in path:
    print("thread 'main' panicked", file=sys.stderr)
    sys.exit(101)
j = crosscheck.fake_hopmap(path)["json"]
if "wrong" in path:
    j["positions_in_cell"] += 1
    j["composition"]["Na"] = 3.5
    j["cell"]["volume"] *= 1.01
print(json.dumps(j))
"""


def self_test():
    """Runs check_file on a stand-in hopmap executable and small files; returns 0 when every
    verdict is the expected one."""
    import tempfile

    d = Path(tempfile.mkdtemp(prefix="crosscheck-"))
    exe = d / "hopmap"
    exe.write_text(STAND_IN.format(python=sys.executable, tools=str(Path(__file__).parent)))
    exe.chmod(0o755)
    for name in ("nacl.cif", "wrong.cif", "panic.cif"):
        (d / name).write_text(NACL_CIF)
    (d / "broken.cif").write_text("data_x\n_cell_length_a 'unterminated\n")
    expect = {
        "nacl.cif": {"syntax": "agree", "positions": "agree", "composition": "agree",
                     "volume": "agree"},
        "wrong.cif": {"positions": "DISAGREE", "composition": "DISAGREE", "volume": "DISAGREE"},
        "panic.cif": {"run": "DISAGREE"},
        "broken.cif": {"syntax": "agree", "structure": "agree"},
    }
    failures = 0
    for name, want in expect.items():
        rows, _ = check_file((d / name, name, str(exe), 30, None))
        got = {r["check"]: r["verdict"] for r in rows}
        for check, verdict in want.items():
            if got.get(check) != verdict:
                failures += 1
                print(f"self-test: {name} [{check}]: expected {verdict}, got {got.get(check)}"
                      f" ({rows})")
    print("self-test: " + ("ok" if not failures else f"{failures} failures"))
    return 1 if failures else 0


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0],
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--hopmap", default=os.environ.get("HOPMAP_BIN",
                                                       str(ROOT / "target/release/hopmap")),
                    help="hopmap binary (default $HOPMAP_BIN or target/release/hopmap); "
                         "'fake:gemmi' for a stand-in")
    ap.add_argument("paths", nargs="*",
                    help="CIF files or directories (default structures/ and ../shared/cif-corpus/)")
    ap.add_argument("--root", action="append", help="directory of CIF files (repeatable)")
    ap.add_argument("--out", default=str(ROOT / "target/crosscheck.tsv"),
                    help="where to write the full table (TSV)")
    ap.add_argument("--known", default=str(ROOT / "tools/crosscheck_known.tsv"))
    ap.add_argument("--jobs", type=int, default=min(4, os.cpu_count() or 1))
    ap.add_argument("--timeout", type=int, default=30, help="seconds per tool and file")
    ap.add_argument("--syntax-args", default=None,
                    help="hopmap arguments for a document-only verdict, e.g. 'check --json'")
    ap.add_argument("--self-test", action="store_true",
                    help="check this script against a stand-in hopmap and exit")
    args = ap.parse_args(argv)
    if args.self_test:
        return self_test()

    binary = args.hopmap
    if not binary.startswith("fake:") and not Path(binary).exists():
        print(f"crosscheck: hopmap binary {binary} not found (build it with "
              f"`cargo build --release`, or pass --hopmap / set HOPMAP_BIN)", file=sys.stderr)
        return 2
    roots = (args.root or []) + [p for p in args.paths if Path(p).is_dir()]
    singles = [Path(p) for p in args.paths if Path(p).is_file()]
    if not roots and not singles:
        roots = [ROOT / "structures", ROOT.parent / "shared" / "cif-corpus"]
    files = find_cifs(roots) + [(p, str(p)) for p in singles]
    if not files:
        print(f"crosscheck: no CIF files under {', '.join(map(str, roots))}", file=sys.stderr)
        return 2
    known = read_known(Path(args.known))
    syntax_args = args.syntax_args.split() if args.syntax_args else None

    t0 = time.time()
    tasks = [(p, d, binary, args.timeout, syntax_args) for p, d in files]
    rows, slowest = [], []
    with cf.ProcessPoolExecutor(max_workers=max(1, args.jobs)) as ex:
        for (p, d), (r, dt) in zip(files, ex.map(check_file, tasks, chunksize=4)):
            rows.extend(r)
            slowest.append((dt, d))

    used = set()
    for r in rows:
        key = (r["file"], r["check"])
        if r["verdict"] == "DISAGREE" and key in known:
            r["verdict"] = "known"
            r["oracle"] += f" [known: {known[key]}]"
            used.add(key)

    out = Path(args.out)
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = out.with_name(out.name + ".tmp")
    with open(tmp, "w") as f:
        f.write("file\tcheck\thopmap\toracle\tverdict\n")
        for r in rows:
            f.write("\t".join(r[k].replace("\t", " ") for k in
                              ("file", "check", "hopmap", "oracle", "verdict")) + "\n")
    tmp.replace(out)

    counts = {}
    for r in rows:
        counts.setdefault(r["check"], {}).setdefault(r["verdict"], 0)
        counts[r["check"]][r["verdict"]] += 1
    print(f"crosscheck: {len(files)} CIF files, hopmap = {binary}, {time.time() - t0:.0f} s")
    for check in ("run", "run-syntax", "syntax", "structure", "positions", "composition",
                  "volume"):
        if check in counts:
            c = counts[check]
            print(f"  {check:12s} " + ", ".join(f"{v} {k}" for k, v in sorted(c.items())))
    bad = [r for r in rows if r["verdict"] == "DISAGREE"]
    for r in bad[:40]:
        print(f"  DISAGREE {r['file']} [{r['check']}]: hopmap {r['hopmap']} | oracle {r['oracle']}")
    if len(bad) > 40:
        print(f"  ... and {len(bad) - 40} more in {out}")
    # A known row for a file that was checked in this run but no longer disagrees is stale: the
    # difference went away (a fix, or a new oracle version) and the row must go, so that the
    # table lists only what is true today. Rows for files not in this run (../shared missing,
    # or a run on a few files) are left alone.
    checked = {d for _, d in files}
    stale = sorted(k for k in set(known) - used if k[0] in checked)
    for f, c in stale:
        print(f"  STALE {args.known}: {f} [{c}] no longer disagrees; remove the row")
    slowest.sort(reverse=True)
    print("  slowest files: " + ", ".join(f"{d} {dt:.1f} s" for dt, d in slowest[:3]))
    print(f"  table: {out}")
    print(f"  {len(used)} known differences (each with its reason in {args.known}), "
          f"{len(bad)} unexplained disagreements, {len(stale)} stale known rows")
    return 1 if bad or stale else 0


if __name__ == "__main__":
    sys.exit(main())

"""hopmap: where mobile ions can travel through a crystal, and how hard each path is.

    >>> import hopmap
    >>> r = hopmap.analyse("LiFePO4.cif", ion="Li")
    >>> r.answer                       # the one-sentence answer
    >>> r.to_dict()                    # the document `hopmap paths --json` prints
    >>> r.energy_grid().shape          # (na, nb, nc) site energies, eV
    >>> r.sites()["frac"]              # sites of the ion, fractional coordinates

`analyse` takes a path (CIF, POSCAR, extended XYZ), a pymatgen Structure or an ASE Atoms, and the
command line's options with underscores (spacing, temperature, attempt_frequency,
correlation_factor, site_filling, diffusivity, inserted, min_ion_distance, oxidation, exclude,
params). Numbers are screening estimates from a bond-valence model, not cell design.
"""

from __future__ import annotations

import html as _html
import json as _json
import math as _math
import os as _os
from typing import Any, Callable, Dict, Iterable, List, Optional, Tuple, Union

from . import _convert
from ._hopmap import __version__, analyse_parts as _analyse_parts, analyse_path as _analyse_path
from ._hopmap import analyse_text as _analyse_text
from .errors import (
    Cancelled,
    HopmapError,
    InputError,
    ModelError,
    OptionsError,
    OverBudgetError,
    StructureError,
)

__all__ = [
    "analyse",
    "analyse_text",
    "Analysis",
    "HopmapError",
    "InputError",
    "OptionsError",
    "ModelError",
    "StructureError",
    "OverBudgetError",
    "Cancelled",
    "__version__",
]


def _options(
    spacing: Optional[float],
    temperature: Optional[float],
    attempt_frequency: Optional[float],
    correlation_factor: Optional[float],
    site_filling: Optional[float],
    diffusivity: Optional[float],
    inserted: Optional[float],
    min_ion_distance: Optional[float],
    oxidation: Union[None, str, Dict[str, float]],
    exclude: Iterable[str],
    params: Union[None, str, "_os.PathLike[str]"],
    progress: Optional[Callable[[str, int, int], Optional[bool]]],
) -> Dict[str, Any]:
    if isinstance(oxidation, dict):
        oxidation = ",".join(f"{k}={v}" for k, v in oxidation.items())
    return {
        "spacing": spacing,
        "temperature": temperature,
        "attempt_frequency": attempt_frequency,
        "correlation_factor": correlation_factor,
        "site_filling": site_filling,
        "diffusivity": diffusivity,
        "inserted": inserted,
        "min_ion_distance": min_ion_distance,
        "oxidation": oxidation,
        "exclude": list(exclude) or None,
        "params": _os.fspath(params) if params is not None else None,
        "progress": progress,
    }


def analyse(
    source: Any,
    ion: str = "Li",
    *,
    block: Optional[str] = None,
    keep_cell: bool = False,
    spacing: Optional[float] = None,
    temperature: Optional[float] = None,
    attempt_frequency: Optional[float] = None,
    correlation_factor: Optional[float] = None,
    site_filling: Optional[float] = None,
    diffusivity: Optional[float] = None,
    inserted: Optional[float] = None,
    min_ion_distance: Optional[float] = None,
    oxidation: Union[None, str, Dict[str, float]] = None,
    exclude: Iterable[str] = (),
    params: Union[None, str, "_os.PathLike[str]"] = None,
    progress: Optional[Callable[[str, int, int], Optional[bool]]] = None,
) -> "Analysis":
    """Analyse where `ion` can travel in `source`: a file path (CIF, POSCAR/CONTCAR, extended
    XYZ), a pymatgen ``Structure`` or an ASE ``Atoms``.

    Options are the command line's (`hopmap paths --help`), in its units: spacing in A,
    temperature in K, attempt_frequency in Hz, diffusivity in m^2/s, min_ion_distance in A;
    ``oxidation`` as ``"Co=3.5,Fe1=2"`` or ``{"Co": 3.5}``. ``progress(stage, done, total)`` is
    called during the landscape; returning ``False`` stops the analysis (:class:`Cancelled`).
    The computation runs with the interpreter lock released.

    Raises :class:`InputError`, :class:`OptionsError`, :class:`ModelError`,
    :class:`StructureError` or :class:`Cancelled`, each naming the file and the place.
    """
    opts = _options(spacing, temperature, attempt_frequency, correlation_factor, site_filling,
                    diffusivity, inserted, min_ion_distance, oxidation, exclude, params, progress)
    if isinstance(source, (str, bytes, _os.PathLike)):
        path = _os.fsdecode(source)
        return Analysis(_analyse_path(path, ion, block, keep_cell, opts))
    if _convert.is_pymatgen_structure(source):
        parts = _convert.from_pymatgen(source)
    elif _convert.is_ase_atoms(source):
        parts = _convert.from_ase(source)
    else:
        raise TypeError(
            f"analyse() takes a path, a pymatgen Structure or an ASE Atoms, not {type(source).__name__}"
        )
    name, lattice, species, frac, occ = parts
    return Analysis(_analyse_parts(name, lattice, species, frac, occ, ion, keep_cell, opts))


def analyse_text(text: str, format: str = "cif", ion: str = "Li", *, name: str = "<text>", **options: Any) -> "Analysis":
    """As :func:`analyse`, from the text of a structure file held in memory; ``format`` is
    ``cif``, ``poscar`` or ``xyz``; ``name`` names it in messages."""
    allowed = set(_options.__code__.co_varnames[: _options.__code__.co_argcount])
    unknown = set(options) - allowed
    if unknown:
        raise OptionsError(f"unknown option(s): {', '.join(sorted(unknown))}", "options", None,
                           ", ".join(sorted(unknown)), "unknown option of analyse_text()")
    opts = _options(**{k: options.get(k) for k in allowed if k != "exclude"},
                    exclude=options.get("exclude", ()))
    return Analysis(_analyse_text(text, format, name, ion, opts))


class Analysis:
    """The result of one analysis. ``to_dict()`` equals the JSON of ``hopmap paths --json``
    (schema ``hopmap.paths/…``, documented in the README)."""

    def __init__(self, inner: Any) -> None:
        self._inner = inner
        self._dict: Optional[Dict[str, Any]] = None

    @property
    def answer(self) -> str:
        """The one-sentence answer: dimension, directions and barrier of the lowest network."""
        return self._inner.answer

    @property
    def ion(self) -> str:
        return self._inner.ion

    def to_dict(self) -> Dict[str, Any]:
        """The document ``hopmap paths --json`` prints, as Python objects (a fresh copy)."""
        if self._dict is None:
            self._dict = _json.loads(self._inner.json())
        return _json.loads(_json.dumps(self._dict))

    def to_json(self) -> str:
        return self._inner.json()

    @property
    def warnings(self) -> List[Tuple[str, str]]:
        """(kind, sentence) pairs; kinds: structure, parameters, valence, landscape, network,
        transport, capacity."""
        return self._inner.warnings()

    def terminal(self) -> str:
        """The text ``hopmap paths`` prints."""
        return self._inner.terminal()

    def html(self) -> str:
        """The self-contained HTML report ``hopmap paths --report`` writes."""
        return self._inner.html()

    def write_report(self, path: Union[str, "_os.PathLike[str]"]) -> None:
        """Writes the HTML report to `path` (written whole: a temporary file renamed)."""
        path = _os.fspath(path)
        tmp = f"{path}.part"
        with open(tmp, "w", encoding="utf-8") as f:
            f.write(self.html())
        _os.replace(tmp, path)

    def figures(self) -> Dict[str, str]:
        """The report's figures, name -> SVG text."""
        return dict(self._inner.figures())

    def lattice(self) -> Any:
        """Cell vectors as rows, A: NumPy array (3, 3)."""
        return self._inner.lattice()

    def energy_grid(self) -> Any:
        """Site energy of the probe ion (eV), NumPy float32 array (na, nb, nc); point (i, j, k) sits
        at fractional position (i/na, j/nb, k/nc)."""
        return self._inner.energy_grid()

    def mismatch_grid(self) -> Any:
        """Bond-valence mismatch |dV| (v.u.), NumPy float32 array (na, nb, nc)."""
        return self._inner.mismatch_grid()

    def sites(self) -> Dict[str, Any]:
        """Sites of the ion in the landscape: ``frac`` (n, 3), ``energy_ev``, ``orbit``,
        ``multiplicity``, ``occupied`` (NumPy arrays) and ``label`` (list; the file's site within
        reach, or None). Sites are ordered by energy."""
        return self._inner.sites()

    def hops(self) -> Dict[str, Any]:
        """Hops: ``from``, ``to`` (site indices), ``image`` (n, 3), ``barrier_ev``,
        ``saddle_ev``, ``length_a`` (NumPy arrays)."""
        return self._inner.hops()

    def structure(self) -> Any:
        """The analysed structure (oxidation states filled in) as a pymatgen Structure."""
        entries = self._inner.structure_parts()
        return _convert.to_pymatgen(self.lattice(), entries, [_math.nan] * len(entries))

    def structure_with_ion(self, sites: str = "lowest") -> Any:
        """A pymatgen Structure: the framework (the mobile ion's own sites removed) with the ion
        placed on the landscape's sites: ``"lowest"`` (the lowest orbit), ``"occupied"`` (sites
        that match the file's sites of the ion) or ``"all"``. The site property
        ``site_energy_ev`` holds each placed ion's energy (NaN on framework sites). Sites closer
        than the ions' exclusion distance are not filtered: this shows where the ion can sit,
        not a filling."""
        if sites not in ("lowest", "occupied", "all"):
            raise OptionsError(f"sites='{sites}': use 'lowest', 'occupied' or 'all'", "options",
                               None, "sites", "use 'lowest', 'occupied' or 'all'")
        ion = self.ion
        framework = [e for e in self._inner.structure_parts()
                     if "".join(c for c in e[0] if c.isalpha()) != ion]
        s = self.sites()
        picks = []
        for i in range(len(s["energy_ev"])):
            if sites == "all" or (sites == "lowest" and int(s["orbit"][i]) == int(s["orbit"][0])) \
                    or (sites == "occupied" and bool(s["occupied"][i])):
                picks.append(i)
        entries = framework + [(ion + "+" if ion in ("Li", "Na", "K", "Ag", "Cu", "Rb", "Cs") else ion,
                                [float(x) for x in s["frac"][i]], 1.0) for i in picks]
        energies = [_math.nan] * len(framework) + [float(s["energy_ev"][i]) for i in picks]
        return _convert.to_pymatgen(self.lattice(), entries, energies)

    def __repr__(self) -> str:
        return repr(self._inner)

    def _repr_html_(self) -> str:
        d = self.to_dict()
        rows = []
        for n in d.get("networks", []):
            rows.append(
                "<tr><td>{}D</td><td>{}</td><td>{}</td></tr>".format(
                    n.get("dimension"),
                    _html.escape(", ".join(str(x) for x in n.get("directions", [])) or "-"),
                    _html.escape(_fmt_barrier(n)),
                )
            )
        table = (
            "<table><tr><th>network</th><th>directions</th><th>barrier</th></tr>"
            + "".join(rows)
            + "</table>"
            if rows
            else ""
        )
        warns = "".join(f"<li>{_html.escape(k)}: {_html.escape(m)}</li>" for k, m in self.warnings)
        figs = self.figures()
        first = "".join(svg for name, svg in list(figs.items())[:2])
        return (
            f"<div class='hopmap'><p><b>{_html.escape(self.answer)}</b></p>{table}"
            + (f"<details><summary>{len(self.warnings)} warnings</summary><ul>{warns}</ul></details>" if warns else "")
            + f"<div>{first}</div><p><small>Screening estimates from a bond-valence model, not "
              "cell design.</small></p></div>"
        )


def _fmt_barrier(n: Dict[str, Any]) -> str:
    b = n.get("barrier_ev")
    u = n.get("barrier_uncertainty_ev")
    if b is None:
        return "-"
    return f"{b:.2f} ± {u:.2f} eV" if u is not None else f"{b:.2f} eV"

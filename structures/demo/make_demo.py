#!/usr/bin/env python3
"""Writes the demo CIFs of the (fictional) Quillfeather Group scenario, see README.md.

All five structures are INVENTED, idealised model frameworks: compositions, cells and coordinates
were chosen by us for the demo. None is a characterised phase or copied from a publication.
Where a structure has free coordinates, they were set by a small bond-valence minimisation of our
own (minimising the global instability index with the first-shell bond-valence parameters used by
tools/check_structures.py, with soft penalties keeping anion-anion contacts >= 2.55 A, cation-
cation contacts >= 3.1 A and every cation six-coordinate within 2.25 A), then rounded.
Run: python structures/demo/make_demo.py   (needs numpy and spglib)
"""

from __future__ import annotations

import os
import sys

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.dirname(HERE))
from cifgen import write_cif  # noqa: E402

INVENTED = (
    "DEMO DATA, INVENTED: a model framework of the fictional Quillfeather Group scenario\n"
    "(structures/demo/README.md). Composition, cell and coordinates are our own choice, not a\n"
    "published or characterised phase. Chemically sensible by construction: charge balanced,\n"
    "bond-valence sums near the formal valences, no short contacts\n"
    "(checked by tools/check_structures.py)."
)

DEMO = [
    dict(
        file="QF1_rutile_tunnel.cif",
        block="QF1_rutile_Ti3SnO8",
        name="QF-1, idealised 1x1 rutile-type tunnel oxide (Ti0.75Sn0.25)O2",
        comment=f"""\
QF-1: idealised rutile-type tunnel oxide (Ti0.75Sn0.25)O2, P4_2/mnm (No. 136).
Edge-sharing octahedral chains along c enclose 1x1 channels along c; probe ions (Li+) enter
the empty octahedral channel sites. Ti/Sn share one metal site at random (3:1).
Cell a = 4.63, c = 3.016 A (between rutile TiO2 and cassiterite SnO2 in proportion to the
composition), O 4f x = 0.3055.
{INVENTED}
Oxidation states: Ti4+, Sn4+, O2-.""",
        cell=(4.63, 4.63, 3.016, 90, 90, 90),
        hm="P 42/m n m",
        number=136,
        hall=419,
        hall_symbol="-P 4n 2n",
        z=2,
        sites=[
            ("Ti1", "Ti4+", 0.0, 0.0, 0.0, 0.75),
            ("Sn1", "Sn4+", 0.0, 0.0, 0.0, 0.25),
            ("O1", "O2-", 0.3055, 0.3055, 0.0, 1.0),
        ],
    ),
    dict(
        file="QF2_hollandite_tunnel.cif",
        block="QF2_hollandite_Mn3TiO8",
        name="QF-2, idealised 2x2 hollandite-type tunnel oxide (Mn0.75Ti0.25)O2",
        comment=f"""\
QF-2: idealised hollandite-type 2x2 tunnel framework (Mn0.75Ti0.25)O2, I4/m (No. 87),
with EMPTY tunnels. Double chains of edge-sharing octahedra share corners to enclose 2x2
tunnels (and 1x1 tunnels) along c. Mn/Ti share the metal site at random (3:1), all 4+.
Cell a = 9.87, c = 2.88 A; metal (0.3485, 0.1669, 0), O1 (0.1537, 0.2014, 0),
O2 (0.5415, 0.1659, 0) (the alpha-MnO2 arrangement in a slightly expanded cell).
{INVENTED}
Oxidation states: Mn4+, Ti4+, O2-.""",
        cell=(9.87, 9.87, 2.88, 90, 90, 90),
        hm="I 4/m",
        number=87,
        hall=363,
        hall_symbol="-I 4",
        z=8,
        sites=[
            ("Mn1", "Mn4+", 0.3485, 0.1669, 0.0, 0.75),
            ("Ti1", "Ti4+", 0.3485, 0.1669, 0.0, 0.25),
            ("O1", "O2-", 0.1537, 0.2014, 0.0, 1.0),
            ("O2", "O2-", 0.5415, 0.1659, 0.0, 1.0),
        ],
    ),
    dict(
        file="QF3_reo3_cube.cif",
        block="QF3_ReO3type_MoWO6",
        name="QF-3, idealised ReO3-type cube framework (Mo0.5W0.5)O3",
        comment=f"""\
QF-3: idealised cubic ReO3-type framework (Mo0.5W0.5)O3, Pm-3m (No. 221): corner-sharing
octahedra with empty cube-centre cavities connected in three dimensions. Mo/W share the metal
site at random (1:1). Cell a = 3.82 A (M-O 1.91 A); no octahedral tilts (idealised).
{INVENTED}
Oxidation states: Mo6+, W6+, O2-.""",
        cell=(3.82, 3.82, 3.82, 90, 90, 90),
        hm="P m -3 m",
        number=221,
        hall=517,
        hall_symbol="-P 4 2 3",
        z=1,
        sites=[
            ("Mo1", "Mo6+", 0.0, 0.0, 0.0, 0.5),
            ("W1", "W6+", 0.0, 0.0, 0.0, 0.5),
            ("O1", "O2-", 0.5, 0.0, 0.0, 1.0),
        ],
    ),
    dict(
        file="QF4_shear_slab.cif",
        block="QF4_shear_WNb2O8",
        name="QF-4, idealised crystallographic-shear slab oxide WNb2O8",
        comment=f"""\
QF-4: idealised crystallographic-shear oxide WNb2O8, Cmmm (No. 65). ReO3-type slabs three
octahedra wide (along a), infinite along b and c, joined to the neighbouring slabs, shifted by
(1/2,1/2,0), through edge-sharing octahedra at the shear planes (3 x infinity blocks).
W6+ on the slab-centre site 2a, Nb5+ on the slab-edge site 4g; the anion O5 at the shear plane
is shared by three Nb. Inside the slabs, ReO3-type cavities form channels along b and c.
Cell a = 20.90, b = 3.834, c = 3.831 A; Nb (0.1831,0,0); O3 (0.0918,0,0); O4 (0.1841,0,1/2);
O5 (0.2903,0,0); the others fixed by symmetry. Free parameters from our bond-valence
minimisation (see make_demo.py), rounded.
{INVENTED}
Oxidation states: W6+, Nb5+, O2-.""",
        cell=(20.90, 3.834, 3.831, 90, 90, 90),
        hm="C m m m",
        number=65,
        hall=310,
        hall_symbol="-C 2 2",
        z=2,
        sites=[
            ("W1", "W6+", 0.0, 0.0, 0.0, 1.0),
            ("Nb1", "Nb5+", 0.1831, 0.0, 0.0, 1.0),
            ("O1", "O2-", 0.0, 0.0, 0.5, 1.0),
            ("O2", "O2-", 0.5, 0.0, 0.0, 1.0),
            ("O3", "O2-", 0.0918, 0.0, 0.0, 1.0),
            ("O4", "O2-", 0.1841, 0.0, 0.5, 1.0),
            ("O5", "O2-", 0.2903, 0.0, 0.0, 1.0),
        ],
    ),
    dict(
        file="QF5_hexagonal_bronze.cif",
        block="QF5_HTB_Na0.1WO3",
        name="QF-5, idealised hexagonal tungsten bronze Na0.1WO3, partly filled tunnels",
        comment=f"""\
QF-5: idealised hexagonal tungsten bronze Na0.1WO3, P6/mmm (No. 191). Corner-sharing WO6
octahedra in six-membered rings stacked along c enclose hexagonal tunnels (and trigonal ones).
The hexagonal tunnels are partly filled: Na on 1a (0,0,0), occupancy 0.3 (Na0.1WO3). The
electrons of Na are placed on W: W5+ 0.1 + W6+ 0.9 on one site (average 5.9+).
Cell a = 7.30, c = 3.83 A; O2 6l (x,2x,0), x = 0.2018 (free parameters from our bond-valence
minimisation, see make_demo.py). Na in the wide hexagonal tunnel is somewhat under-bonded
(bond-valence sum about 0.8 v.u.); the site is partly occupied, so the checker reports it only.
{INVENTED}
Oxidation states: Na+, W6+/W5+, O2-.""",
        cell=(7.30, 7.30, 3.83, 90, 90, 120),
        hm="P 6/m m m",
        number=191,
        hall=485,
        hall_symbol="-P 6 2",
        z=3,
        sites=[
            ("W1a", "W6+", 0.5, 0.0, 0.0, 0.9),
            ("W1b", "W5+", 0.5, 0.0, 0.0, 0.1),
            ("O1", "O2-", 0.5, 0.0, 0.5, 1.0),
            ("O2", "O2-", 0.2018, 0.4036, 0.0, 1.0),
            ("Na1", "Na1+", 0.0, 0.0, 0.0, 0.3),
        ],
    ),
]


def main() -> None:
    for st in DEMO:
        st = dict(st)
        path = os.path.join(HERE, st.pop("file"))
        write_cif(path, **st)
        print("wrote", path)


if __name__ == "__main__":
    main()

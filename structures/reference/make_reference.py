#!/usr/bin/env python3
"""Writes the reference CIFs in this directory from the published data listed below.

Each entry: the asymmetric unit (label, type symbol with charge, x, y, z, occupancy), the cell,
the space group (Hall number in spglib's table, which fixes the setting: origin choice 2 for
Fd-3m and Ia-3d, hexagonal axes for R groups) and a comment block naming the publication.
Run: python structures/reference/make_reference.py   (needs numpy and spglib)
Check: python tools/check_structures.py
"""

from __future__ import annotations

import os
import sys

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.dirname(HERE))
from cifgen import write_cif  # noqa: E402

MEMORY = (
    "Coordinates from memory of the published table (not copied from a file at hand);\n"
    "confirm against the original before quoting them elsewhere. The channel topology\n"
    "(dimension, direction) does not hinge on the last digit; bond lengths and energies do."
)

STRUCTURES = [
    dict(
        file="LiFePO4_olivine.cif",
        block="LiFePO4_olivine",
        name="lithium iron phosphate, olivine (triphylite)",
        comment=f"""\
Olivine LiFePO4 (triphylite), space group Pnma (No. 62, standard setting a > b > c here:
a = 10.332, b = 6.010, c = 4.692 A). Li on the inversion centres 4a (M1), Fe on the mirror 4c (M2).
Source: A. Streltsov, E. L. Belokoneva, V. G. Tsirelson, N. K. Hansen, "Multipole analysis of
the electron density in triphylite, LiFePO4, using X-ray diffraction data", Acta Crystallogr.
B49 (1993) 147-153. Data used: cell, space group, fractional coordinates; all sites fully occupied.
{MEMORY}
Oxidation states: Li+, Fe2+, P5+, O2- (formal, fully lithiated).""",
        cell=(10.332, 6.010, 4.692, 90, 90, 90),
        hm="P n m a",
        number=62,
        hall=292,
        hall_symbol="-P 2ac 2n",
        z=4,
        sites=[
            ("Li1", "Li1+", 0.0, 0.0, 0.0, 1.0),
            ("Fe1", "Fe2+", 0.28222, 0.25, 0.97472, 1.0),
            ("P1", "P5+", 0.09486, 0.25, 0.41820, 1.0),
            ("O1", "O2-", 0.09678, 0.25, 0.74279, 1.0),
            ("O2", "O2-", 0.45710, 0.25, 0.20602, 1.0),
            ("O3", "O2-", 0.16558, 0.04646, 0.28478, 1.0),
        ],
    ),
    dict(
        file="LiCoO2_layered.cif",
        block="LiCoO2_layered",
        name="lithium cobalt oxide, layered (O3, alpha-NaFeO2 type)",
        comment=f"""\
Layered LiCoO2 (O3 stacking, alpha-NaFeO2 type), space group R-3m (No. 166), hexagonal axes
(obverse setting, R-centring +(2/3,1/3,1/3), +(1/3,2/3,2/3)).
Source: H. J. Orman, P. J. Wiseman, "Cobalt(III) lithium oxide, CoLiO2: structure refinement by
powder neutron diffraction", Acta Crystallogr. C40 (1984) 12-14.
Data used: a = 2.8156, c = 14.0542 A; Li 3a (0,0,0), Co 3b (0,0,1/2), O 6c (0,0,z), z = 0.2396
(equivalently z = 0.2604 with Co on 3a); all sites fully occupied.
{MEMORY}
Oxidation states: Li+, Co3+, O2-.""",
        cell=(2.8156, 2.8156, 14.0542, 90, 90, 120),
        hm="R -3 m",
        number=166,
        hall=458,
        hall_symbol='-R 3 2"',
        z=3,
        sites=[
            ("Li1", "Li1+", 0.0, 0.0, 0.0, 1.0),
            ("Co1", "Co3+", 0.0, 0.0, 0.5, 1.0),
            ("O1", "O2-", 0.0, 0.0, 0.2396, 1.0),
        ],
    ),
    dict(
        file="LiMn2O4_spinel.cif",
        block="LiMn2O4_spinel",
        name="lithium manganese oxide, spinel",
        comment=f"""\
Spinel LiMn2O4, space group Fd-3m (No. 227), ORIGIN CHOICE 2 (inversion centre at the origin):
Li 8a (1/8,1/8,1/8), Mn 16d (1/2,1/2,1/2), O 32e (x,x,x).
Source: M. M. Thackeray, W. I. F. David, P. G. Bruce, J. B. Goodenough, "Lithium insertion into
manganese spinels", Mater. Res. Bull. 18 (1983) 461-472.
Data used: a = 8.245 A, x(O) = 0.2631 (origin 2; 0.3881 in origin choice 1); all sites fully
occupied. The cubic room-temperature phase has one Mn site with average valence 3.5; it is
written here as a mixed site, Mn3+ 0.5 + Mn4+ 0.5 (the charge order below ~280 K is ignored).
{MEMORY}
Oxidation states: Li+, Mn3+/Mn4+ (average 3.5+), O2-.""",
        cell=(8.245, 8.245, 8.245, 90, 90, 90),
        hm="F d -3 m",
        number=227,
        hall=526,
        hall_symbol="-F 4vw 2vw 3",
        z=8,
        sites=[
            ("Li1", "Li1+", 0.125, 0.125, 0.125, 1.0),
            ("Mn1a", "Mn3+", 0.5, 0.5, 0.5, 0.5),
            ("Mn1b", "Mn4+", 0.5, 0.5, 0.5, 0.5),
            ("O1", "O2-", 0.2631, 0.2631, 0.2631, 1.0),
        ],
    ),
    dict(
        file="Li4Ti5O12_spinel.cif",
        block="Li4Ti5O12_spinel",
        name="lithium titanate, spinel Li[Li1/3Ti5/3]O4",
        comment=f"""\
Spinel Li4Ti5O12 = Li(8a)[Li1/3 Ti5/3](16d)O4, space group Fd-3m (No. 227), ORIGIN CHOICE 2:
Li 8a (1/8,1/8,1/8); 16d (1/2,1/2,1/2) shared by Li (1/6) and Ti (5/6); O 32e (x,x,x).
Source: S. Scharner, W. Weppner, P. Schmid-Beurmann, "Evidence of two-phase formation upon
lithium insertion into the Li1.33Ti1.67O4 spinel", J. Electrochem. Soc. 146 (1999) 857-861.
Data used: a = 8.3595 A, x(O) = 0.2625 (origin 2), occupancies from the nominal composition
(Li 1/6 + Ti 5/6 on 16d, 8a and 32e full).
{MEMORY}
Oxidation states: Li+, Ti4+, O2-.""",
        cell=(8.3595, 8.3595, 8.3595, 90, 90, 90),
        hm="F d -3 m",
        number=227,
        hall=526,
        hall_symbol="-F 4vw 2vw 3",
        z=8,
        sites=[
            ("Li1", "Li1+", 0.125, 0.125, 0.125, 1.0),
            ("Li2", "Li1+", 0.5, 0.5, 0.5, 1 / 6),
            ("Ti2", "Ti4+", 0.5, 0.5, 0.5, 5 / 6),
            ("O1", "O2-", 0.2625, 0.2625, 0.2625, 1.0),
        ],
    ),
    dict(
        file="TiO2_rutile.cif",
        block="TiO2_rutile",
        name="titanium dioxide, rutile",
        comment="""\
Rutile TiO2, space group P4_2/mnm (No. 136): Ti 2a (0,0,0), O 4f (x,x,0). A host without
lithium: the probe ion is inserted into the empty octahedral channels along c.
Source: J. K. Burdett, T. Hughbanks, G. J. Miller, J. W. Richardson Jr., J. V. Smith,
"Structural-electronic relationships in inorganic solids: powder neutron diffraction studies of
the rutile and anatase polymorphs of titanium dioxide at 15 and 295 K",
J. Am. Chem. Soc. 109 (1987) 3639-3646.
Data used: 295 K values a = 4.5937, c = 2.9587 A, x(O) = 0.30478; all sites fully occupied.
Coordinates from memory of the published table; confirm against the original.
Oxidation states: Ti4+, O2-.""",
        cell=(4.5937, 4.5937, 2.9587, 90, 90, 90),
        hm="P 42/m n m",
        number=136,
        hall=419,
        hall_symbol="-P 4n 2n",
        z=2,
        sites=[
            ("Ti1", "Ti4+", 0.0, 0.0, 0.0, 1.0),
            ("O1", "O2-", 0.30478, 0.30478, 0.0, 1.0),
        ],
    ),
    dict(
        file="MnO2_hollandite.cif",
        block="MnO2_alpha_hollandite",
        name="alpha-manganese dioxide, hollandite-type framework",
        comment=f"""\
alpha-MnO2, hollandite-type framework of double chains of edge-sharing MnO6 octahedra that share
corners to enclose 2x2 tunnels along c (and 1x1 tunnels). Space group I4/m (No. 87); Mn and both
O sites on 8h (x,y,0). Decision: the tunnels are EMPTY here. Synthetic alpha-MnO2 usually holds
some water or K+/NH4+ in the 2x2 tunnel (site 2b, (0,0,1/2)); those species are left out so that
the file is the host framework, with Mn4+ throughout.
Source: M. H. Rossouw, D. C. Liles, M. M. Thackeray, W. I. F. David, S. Hull, "Alpha manganese dioxide
for lithium batteries: a structural and electrochemical study", Mater. Res. Bull. 27 (1992)
221-230.
Data used: a = 9.815, c = 2.847 A; Mn (0.3485, 0.1669, 0), O1 (0.1537, 0.2014, 0),
O2 (0.5415, 0.1659, 0); tunnel contents omitted (see above).
{MEMORY}
Oxidation states: Mn4+, O2-.""",
        cell=(9.815, 9.815, 2.847, 90, 90, 90),
        hm="I 4/m",
        number=87,
        hall=363,
        hall_symbol="-I 4",
        z=8,
        sites=[
            ("Mn1", "Mn4+", 0.3485, 0.1669, 0.0, 1.0),
            ("O1", "O2-", 0.1537, 0.2014, 0.0, 1.0),
            ("O2", "O2-", 0.5415, 0.1659, 0.0, 1.0),
        ],
    ),
    dict(
        file="Li7La3Zr2O12_garnet.cif",
        block="LLZO_cubic_garnet",
        name="lithium lanthanum zirconate, cubic garnet",
        comment=f"""\
Cubic garnet Li7La3Zr2O12 (LLZO), space group Ia-3d (No. 230), ORIGIN CHOICE 2:
La 24c (1/8,0,1/4), Zr 16a (0,0,0), O 96h; Li partly occupies the tetrahedral 24d site
(3/8,0,1/4) and the split octahedral 96h site (displaced from 48g).
Source: J. Awaka, A. Takashima, K. Kataoka, N. Kijima, Y. Idemoto, J. Akimoto, "Crystal structure
of fast lithium-ion-conducting cubic Li7La3Zr2O12", Chem. Lett. 40 (2011) 60-62.
Data used: a = 12.9827 A; O (0.28165, 0.10048, 0.19526); Li1 24d occupancy 0.564;
Li2 96h (0.0939, 0.6904, 0.5812) with occupancy 0.442333, set by us so that the cell holds
exactly 56 Li (Z = 8) and is charge neutral (published value about 0.44).
{MEMORY}
Oxidation states: Li+, La3+, Zr4+, O2-.""",
        cell=(12.9827, 12.9827, 12.9827, 90, 90, 90),
        hm="I a -3 d",
        number=230,
        hall=530,
        hall_symbol="-I 4bd 2c 3",
        z=8,
        sites=[
            ("La1", "La3+", 0.125, 0.0, 0.25, 1.0),
            ("Zr1", "Zr4+", 0.0, 0.0, 0.0, 1.0),
            ("O1", "O2-", 0.28165, 0.10048, 0.19526, 1.0),
            ("Li1", "Li1+", 0.375, 0.0, 0.25, 0.564),
            ("Li2", "Li1+", 0.0939, 0.6904, 0.5812, 0.442333),
        ],
    ),
    dict(
        file="Li6PS5Cl_argyrodite.cif",
        block="Li6PS5Cl_argyrodite",
        name="lithium thiophosphate chloride, argyrodite",
        comment=f"""\
Argyrodite Li6PS5Cl, space group F-43m (No. 216): P 4b (1/2,1/2,1/2) with S1 16e (x,x,x) forming
PS4 tetrahedra; the "free" anions S2- on 4c (1/4,1/4,1/4) and Cl- on 4a (0,0,0); Li half fills
48h (x,x,z) (24 Li in 48 positions).
Source: H.-J. Deiseroth, S.-T. Kong, H. Eckert, J. Vannahme, C. Reiner, T. Zaiss, M. Schlosser,
"Li6PS5X: a class of crystalline Li-rich solids with an unusually high Li+ mobility",
Angew. Chem. Int. Ed. 47 (2008) 755-758.
Data used: a = 9.85 A; S1 x = 0.6199; Li 48h (0.3094, 0.3094, 0.0207), occupancy 1/2.
Simplification: the partial S2-/Cl- exchange between 4a and 4c reported for this compound is
ignored (ordered anion model: Cl on 4a, S on 4c).
{MEMORY}
Oxidation states: Li+, P5+, S2-, Cl-.""",
        cell=(9.85, 9.85, 9.85, 90, 90, 90),
        hm="F -4 3 m",
        number=216,
        hall=512,
        hall_symbol="F -4 2 3",
        z=4,
        sites=[
            ("P1", "P5+", 0.5, 0.5, 0.5, 1.0),
            ("S1", "S2-", 0.6199, 0.6199, 0.6199, 1.0),
            ("S2", "S2-", 0.25, 0.25, 0.25, 1.0),
            ("Cl1", "Cl1-", 0.0, 0.0, 0.0, 1.0),
            ("Li1", "Li1+", 0.3094, 0.3094, 0.0207, 0.5),
        ],
    ),
    dict(
        file="NbO2F_ReO3type.cif",
        block="NbO2F_ReO3_type",
        name="niobium oxide fluoride, ReO3 type",
        comment="""\
NbO2F, a ReO3-type framework: corner-sharing Nb(O,F)6 octahedra, empty cube-centre cavities;
space group Pm-3m (No. 221): Nb 1a (0,0,0), O and F shared at random on 3d (1/2,0,0) in the
ratio 2:1. A host without lithium: the probe ion is inserted into the cavities.
Chosen instead of ReO3 itself because the IUCr bond-valence table (bvparm2013.cif) has no
Re6+-O2- parameter, while Nb5+-O2- and Nb5+-F- are both tabulated.
Source: L. K. Frevel, H. W. Rinn, "The crystal structure of NbO2F and TaO2F",
Acta Crystallogr. 9 (1956) 626-627.
Data used: a = 3.902 A; coordinates fixed by symmetry; anion site O 2/3 + F 1/3.
Cell edge from memory of the published value; confirm against the original.
Oxidation states: Nb5+, O2-, F-.""",
        cell=(3.902, 3.902, 3.902, 90, 90, 90),
        hm="P m -3 m",
        number=221,
        hall=517,
        hall_symbol="-P 4 2 3",
        z=1,
        sites=[
            ("Nb1", "Nb5+", 0.0, 0.0, 0.0, 1.0),
            ("O1", "O2-", 0.5, 0.0, 0.0, 2 / 3),
            ("F1", "F1-", 0.5, 0.0, 0.0, 1 / 3),
        ],
    ),
    dict(
        file="Na3PS4_cubic.cif",
        block="Na3PS4_cubic",
        name="sodium thiophosphate, cubic",
        comment=f"""\
Cubic Na3PS4, space group I-43m (No. 217): P 2a (0,0,0) with S 8c (x,x,x) forming PS4
tetrahedra; Na 6b (0,1/2,1/2), fully occupied in this model. Sodium conductor with a 3D network.
Source: A. Hayashi, K. Noi, A. Sakuda, M. Tatsumisago, "Superionic glass-ceramic electrolytes
for room-temperature rechargeable sodium batteries", Nat. Commun. 3 (2012) 856 (cubic phase);
the tetragonal polymorph was refined by M. Jansen, U. Henseler, J. Solid State Chem. 99 (1992)
110-119.
Data used: a = 6.9965 A, S x = 0.1699; all sites fully occupied.
{MEMORY}
Oxidation states: Na+, P5+, S2-.""",
        cell=(6.9965, 6.9965, 6.9965, 90, 90, 90),
        hm="I -4 3 m",
        number=217,
        hall=513,
        hall_symbol="I -4 2 3",
        z=2,
        sites=[
            ("Na1", "Na1+", 0.0, 0.5, 0.5, 1.0),
            ("P1", "P5+", 0.0, 0.0, 0.0, 1.0),
            ("S1", "S2-", 0.1699, 0.1699, 0.1699, 1.0),
        ],
    ),
    dict(
        file="Na0.74CoO2_P2.cif",
        block="Na0.74CoO2_P2",
        name="sodium cobalt oxide, P2 layered",
        comment=f"""\
P2-type layered Na0.74CoO2, space group P6_3/mmc (No. 194): CoO2 layers of edge-sharing
octahedra, Co 2a (0,0,0), O 4f (1/3,2/3,z); Na in trigonal prisms between the layers, on two
partly occupied sites at z = 1/4: Na1 2b (0,0,1/4), sharing faces with CoO6, and Na2
2d (2/3,1/3,1/4), sharing edges. Two-dimensional Na+ transport in the Na layers.
Source: R. J. Balsys, R. L. Davis, "Refinement of the structure of Na0.74CoO2 using neutron
powder diffraction", Solid State Ionics 93 (1996) 279-282.
Data used: a = 2.84, c = 10.81 A; O z = 0.0913; Na1 occupancy 0.23, Na2 occupancy 0.51
(total 0.74). Co average valence 3.26, written as a mixed site Co3+ 0.74 + Co4+ 0.26.
{MEMORY}
Oxidation states: Na+, Co3+/Co4+, O2-.""",
        cell=(2.84, 2.84, 10.81, 90, 90, 120),
        hm="P 63/m m c",
        number=194,
        hall=488,
        hall_symbol="-P 6c 2c",
        z=2,
        sites=[
            ("Co1a", "Co3+", 0.0, 0.0, 0.0, 0.74),
            ("Co1b", "Co4+", 0.0, 0.0, 0.0, 0.26),
            ("O1", "O2-", 1 / 3, 2 / 3, 0.0913, 1.0),
            ("Na1", "Na1+", 0.0, 0.0, 0.25, 0.23),
            ("Na2", "Na1+", 2 / 3, 1 / 3, 0.25, 0.51),
        ],
    ),
    dict(
        file="TiNb2O7_block.cif",
        block="TiNb2O7_block",
        name="titanium niobium oxide, Wadsley-Roth crystallographic-shear block phase",
        comment="""\
TiNb2O7, the Wadsley-Roth crystallographic-shear phase built of blocks of 3 x 3 corner-sharing
octahedra, infinite along b, joined by edge sharing at the block borders (shear planes); the
blocks sit at two levels, y = 0 and y = 1/2. Space group C2/m (No. 12, unique axis b, cell
choice 1). Ti and Nb at random, Ti 1/3 + Nb 2/3, on all five metal sites (M1 on 2a, M2-M5 on
4i; Ti written as M1a-M5a, Nb as M1b-M5b); oxygen on 2b and ten 4i sites. A host without
lithium: inside each block four square tunnels run along b.
Sources: the structure type and setting, A. D. Wadsley, "Mixed oxides of titanium and niobium.
I", Acta Crystallogr. 14 (1961) 660-664; the cell a = 20.351, b = 3.801, c = 11.882 A,
beta = 120.19 deg as quoted for TiNb2O7 anodes, e.g. J.-T. Han, Y.-H. Huang, J. B. Goodenough,
Chem. Mater. 23 (2011) 2027-2029. Both from memory; confirm against the originals.
THIS IS A MODEL, NOT THE PUBLISHED COORDINATES: the ideal block framework placed in the
published cell and refined by our own bond-valence distance least squares
(block_oxide_model.py in this folder explains the construction and reproduces the numbers).
Its topology (which octahedra share corners and which share edges) is that of the published
structure, and so are the channels; bond lengths, and so site energies, are the model's. The
published refinements find partial Ti/Nb order, which this model ignores.
Oxidation states: Ti4+, Nb5+, O2-.""",
        cell=(20.351, 3.801, 11.882, 90, 120.19, 90),
        hm="C 1 2/m 1",
        number=12,
        hall=63,
        hall_symbol="-C 2y",
        z=6,
        sites=[
            *[
                (f"M{n}{suffix}", ion, x, 0.0, z, occ)
                for n, (x, z) in enumerate(
                    [(0.0, 0.0), (0.1878, 0.9992), (0.1124, 0.3680), (0.0807, 0.6368), (0.2947, 0.3628)],
                    start=1,
                )
                for suffix, ion, occ in (("a", "Ti4+", 1 / 3), ("b", "Nb5+", 2 / 3))
            ],
            ("O1", "O2-", 0.5, 0.0, 0.0, 1.0),
            ("O2", "O2-", 0.1009, 0.0, 0.9974, 1.0),
            ("O3", "O2-", 0.3107, 0.0, 0.9846, 1.0),
            ("O4", "O2-", 0.0604, 0.0, 0.1920, 1.0),
            ("O5", "O2-", 0.2654, 0.0, 0.1958, 1.0),
            ("O6", "O2-", 0.0175, 0.0, 0.4109, 1.0),
            ("O7", "O2-", 0.2133, 0.0, 0.3882, 1.0),
            ("O8", "O2-", 0.4117, 0.0, 0.3986, 1.0),
            ("O9", "O2-", 0.1969, 0.0, 0.5873, 1.0),
            ("O10", "O2-", 0.3829, 0.0, 0.6183, 1.0),
            ("O11", "O2-", 0.1505, 0.0, 0.8039, 1.0),
        ],
    ),
]


def main() -> None:
    for st in STRUCTURES:
        st = dict(st)
        path = os.path.join(HERE, st.pop("file"))
        write_cif(path, **st)
        print("wrote", path)


if __name__ == "__main__":
    main()

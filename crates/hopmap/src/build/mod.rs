//! Idealised oxide frameworks built from a few parameters: crystallographic-shear block phases
//! and tungsten-bronze-type tunnel frameworks, refined so that bond-valence sums match the
//! formal valences.
//!
//! # What is built
//! - **Block phases** (Wadsley-Roth crystallographic-shear phases): blocks of `n x m`
//!   corner-sharing octahedra of the ReO3 type, infinite along the short axis b (one octahedron
//!   repeat, about 3.8 A), joined at their borders by edge sharing. Two ways of joining:
//!   [`BlockJoin::Ribbon`], every block at one height sharing edges with its neighbours at both
//!   heights so that the blocks make infinite ribbons (TiNb2O7, 3 x 3, C2/m), formula
//!   `M_{nm} O_{3nm-(n+m)}` per block; and [`BlockJoin::Tetrahedral`], blocks at two heights,
//!   each sharing edges only with the four blocks half a repeat away, the corners between them
//!   closed by a tetrahedrally coordinated metal (PNb9O25 3 x 3, Nb12WO33 3 x 4, W3Nb14O44
//!   4 x 4, Nb16W5O55 4 x 5), formula `M_{nm} T O_{3nm-(n+m)+4}` per block (formulas from
//!   memory, checked by counting in the tests).
//! - **Bronzes**: the hexagonal tungsten bronze (rings of six corner-sharing octahedra around
//!   hexagonal tunnels along c, `M3O9` per cell), the tetragonal tungsten bronze (pentagonal,
//!   square and triangular tunnels along c, `M10O30` per cell) and one intergrowth member
//!   (single rows of hexagonal tunnels between ReO3-type slabs two octahedra thick, `M10O30`
//!   per cell; see [`geometry`]), each with an optional tunnel cation.
//!
//! # How
//! Octahedra of a chosen metal-oxygen distance on an ideal grid ([`geometry`]), then every free
//! coordinate and the cell refined by a distance least squares on bond valence ([`refine`]):
//! every ion's bond-valence sum brought to its formal valence, with soft floors on
//! cation-cation and oxygen-oxygen distances so that shared edges do not collapse. The residual
//! is reported as the global instability index (GII, v.u.; Salinas-Sanchez et al., J. Solid
//! State Chem. 100 (1992) 201).
//!
//! # Charge balance
//! The framework fixes the oxygen count; the metals must carry twice that charge minus the
//! tunnel cations'. Each metal takes its highest common oxidation state (Ti4+, Nb5+, W6+, P5+,
//! ...). A mix written without amounts (`Nb,W`) takes the shares that balance the charge (two
//! metals at most); a single metal written alone takes the average valence that balances it
//! (W5.9+ in K0.3WO3), within its common states. A mix written with amounts (`Ti1Nb2`) must
//! balance as written, or the spec is refused with the ratio that would.

pub mod geometry;
pub mod refine;

use crate::element::Element;
use crate::structure::Structure;
use std::fmt::Write as _;

/// How the blocks of a block phase are joined.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum BlockJoin {
    /// Edge sharing only; blocks form infinite ribbons (the `(n x m)_inf` phases).
    Ribbon,
    /// Blocks at two heights joined by edge sharing and by a tetrahedral site at the block
    /// corners (the `(n x m)_1` phases).
    Tetrahedral,
}

/// The tunnel framework of a bronze.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum BronzeKind {
    /// Tetragonal tungsten bronze: pentagonal, square and triangular tunnels along c.
    Tetragonal,
    /// Hexagonal tungsten bronze: hexagonal and triangular tunnels along c.
    Hexagonal,
    /// Intergrowth tungsten bronze: hexagonal-bronze slabs between ReO3-type slabs.
    Intergrowth,
}

impl BronzeKind {
    pub fn word(&self) -> &'static str {
        match self {
            BronzeKind::Tetragonal => "tetragonal",
            BronzeKind::Hexagonal => "hexagonal",
            BronzeKind::Intergrowth => "intergrowth",
        }
    }
}

/// Metals sharing one kind of site, each with its share (the shares add up to 1).
pub type Mix = Vec<(Element, f64)>;

/// What to build: a framework type and its chemistry. Written compactly as text (see
/// [`FrameworkSpec::parse`]).
#[derive(Debug, Clone, PartialEq)]
pub enum FrameworkSpec {
    /// A crystallographic-shear block phase of `n x m` octahedra per block.
    Block {
        n: u32,
        m: u32,
        join: BlockJoin,
        /// Metals on the octahedral sites, mixed at random on every site.
        octahedral: Mix,
        /// Metals on the tetrahedral site ([`BlockJoin::Tetrahedral`] only).
        tetrahedral: Option<Mix>,
    },
    /// A bronze-type tunnel framework of octahedra.
    Bronze {
        kind: BronzeKind,
        /// Metals on the octahedral sites, mixed at random on every site.
        metals: Mix,
        /// A cation in the large tunnels and its amount per framework metal (x in K_x WO3),
        /// spread evenly over the tunnel sites.
        tunnel_cation: Option<(Element, f64)>,
    },
}

/// Options of [`build`].
#[derive(Debug, Clone, PartialEq)]
pub struct BuildOptions {
    /// Metal-oxygen distance of the ideal octahedra (A); `None`: the distance whose bond
    /// valence is one sixth of the mix's average valence (`R = R0 - b ln(V/6)`).
    pub metal_oxygen_a: Option<f64>,
    /// Refine coordinates and cell by bond valence (false: keep the ideal octahedra).
    pub refine: bool,
    /// Most Levenberg-Marquardt iterations of the refinement.
    pub max_iterations: usize,
}

impl Default for BuildOptions {
    fn default() -> Self {
        BuildOptions {
            metal_oxygen_a: None,
            refine: true,
            max_iterations: 200,
        }
    }
}

/// How the refinement went.
#[derive(Debug, Clone, PartialEq)]
pub struct Refinement {
    /// Global instability index after refinement (v.u.), over every ion of the cell, as
    /// [`crate::bv::valence_check`] computes it: each occupant of a mixed site against its own
    /// valence, so a random mix of different valences (Nb5+/W6+) keeps a floor that no
    /// geometry removes.
    pub gii_vu: f64,
    /// The same for the ideal framework, before refinement (v.u.).
    pub initial_gii_vu: f64,
    /// Root-mean-square deviation of the site bond-valence sums from the site valences, a mixed
    /// site counted once with its average valence (v.u.): what the refinement minimises.
    pub site_gii_vu: f64,
    /// The same before refinement (v.u.).
    pub initial_site_gii_vu: f64,
    /// Levenberg-Marquardt iterations taken (0 without refinement).
    pub iterations: usize,
    /// Root-mean-square displacement of the atoms from the ideal framework (A).
    pub rms_shift_a: f64,
    /// True when the step or the change of the residual fell below tolerance.
    pub converged: bool,
    /// Largest violation of a distance floor left after refinement (A, 0 when none).
    pub max_floor_violation_a: f64,
}

/// A built framework: the structure, what it was built from, and how.
#[derive(Debug, Clone, PartialEq)]
pub struct BuiltFramework {
    /// The structure in the built cell (P 1 positions; symmetry found by [`crate::symmetry`]).
    pub structure: Structure,
    pub spec: FrameworkSpec,
    /// Plain sentences describing the construction, recorded in the CIF.
    pub construction: Vec<String>,
    pub refinement: Refinement,
    /// Metal-oxygen distance of the ideal octahedra (A).
    pub metal_oxygen_a: f64,
}

/// How far a built cell can be trusted: what the tests measure against published cells.
pub const CELL_ACCURACY: &str = "cell lengths within 3 % of the published cells of the members \
    checked (TiNb2O7 within 1 %, PNb9O25 and Nb12WO33 within 2.3 %); expect a few percent for \
    others";

/// What a built framework is and is not, for every output that shows one.
pub const CAUTION: &str = "An idealised model of the framework type refined by bond valence, \
    not a published or relaxed structure: use it to rank channels and capacities, then check \
    candidates by DFT or experiment.";

/// What can go wrong building a framework. Every message names the spec.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum BuildError {
    #[error("framework spec '{spec}': {message}")]
    Spec { spec: String, message: String },
    #[error("framework '{spec}': charge does not balance: {message}")]
    Charge { spec: String, message: String },
    #[error("framework '{spec}': {message}")]
    Build { spec: String, message: String },
}

impl FrameworkSpec {
    /// Reads the compact text form:
    ///
    /// - `block:NxM:ribbon:MIX`, e.g. `block:3x3:ribbon:Ti1Nb2` (TiNb2O7), `block:4x4:ribbon:Nb`
    /// - `block:NxM:tet:MIX:TMIX`, e.g. `block:3x4:tet:Nb:W` (Nb12WO33), `block:3x3:tet:Nb:P`
    /// - `bronze:KIND:MIX[:CATION]`, KIND one of `hexagonal`, `tetragonal`, `intergrowth`, e.g.
    ///   `bronze:hexagonal:W:K0.3` (K0.3WO3), `bronze:tetragonal:Nb,W:K0.4`
    ///
    /// A MIX is element symbols with amounts (`Ti1Nb2`, `Ti0.33Nb0.67`: shares in that ratio),
    /// a single element (`Nb`), or symbols separated by commas (`Nb,W`: the shares that balance
    /// the charge). CATION is an element and its amount per framework metal (`K0.3`).
    /// Sizes run from 1 to 8 octahedra.
    pub fn parse(text: &str) -> Result<FrameworkSpec, BuildError> {
        let spec = text.trim();
        let err = |message: String| BuildError::Spec {
            spec: spec.to_string(),
            message,
        };
        let fields: Vec<&str> = spec.split(':').map(str::trim).collect();
        match fields[0].to_ascii_lowercase().as_str() {
            "block" => {
                if fields.len() < 4 {
                    return Err(err("a block phase is written block:NxM:ribbon:METALS or \
                         block:NxM:tet:METALS:TETRAHEDRAL_METALS, e.g. block:3x3:ribbon:Ti1Nb2"
                        .into()));
                }
                let (n, m) = parse_size(fields[1]).map_err(err)?;
                let join = match fields[2].to_ascii_lowercase().as_str() {
                    "ribbon" | "inf" => BlockJoin::Ribbon,
                    "tet" | "tetrahedral" => BlockJoin::Tetrahedral,
                    other => {
                        return Err(err(format!(
                            "'{other}' is not a block join: use 'ribbon' (edge sharing only) or \
                             'tet' (a tetrahedral site at the block corners)"
                        )));
                    }
                };
                let expected = if join == BlockJoin::Ribbon { 4 } else { 5 };
                if fields.len() != expected {
                    return Err(err(format!(
                        "a {} block phase has {expected} fields separated by ':', found {}",
                        if join == BlockJoin::Ribbon {
                            "ribbon"
                        } else {
                            "tetrahedral"
                        },
                        fields.len()
                    )));
                }
                let oct = parse_mix(fields[3]).map_err(err)?;
                let tetrahedral = match join {
                    BlockJoin::Ribbon => None,
                    BlockJoin::Tetrahedral => Some(
                        resolve_mix(&parse_mix(fields[4]).map_err(err)?, None, 1.0).map_err(err)?,
                    ),
                };
                let per_block_o = block_oxygens(n, m, join) as f64;
                let tet_charge = tetrahedral.as_ref().map(|t| t.1).unwrap_or(0.0);
                let charge = 2.0 * per_block_o - tet_charge;
                let octahedral = resolve_mix(&oct, Some(charge), (n * m) as f64)
                    .map_err(|message| BuildError::Charge {
                        spec: spec.to_string(),
                        message,
                    })?
                    .0;
                Ok(FrameworkSpec::Block {
                    n,
                    m,
                    join,
                    octahedral,
                    tetrahedral: tetrahedral.map(|t| t.0),
                })
            }
            "bronze" => {
                if !(3..=4).contains(&fields.len()) {
                    return Err(err(
                        "a bronze is written bronze:KIND:METALS[:CATION], e.g. \
                         bronze:hexagonal:W:K0.3"
                            .into(),
                    ));
                }
                let kind = match fields[1].to_ascii_lowercase().as_str() {
                    "tetragonal" | "ttb" => BronzeKind::Tetragonal,
                    "hexagonal" | "htb" => BronzeKind::Hexagonal,
                    "intergrowth" | "itb" => BronzeKind::Intergrowth,
                    other => {
                        return Err(err(format!(
                            "'{other}' is not a bronze kind: use tetragonal, hexagonal or \
                             intergrowth"
                        )));
                    }
                };
                let mix = parse_mix(fields[2]).map_err(err)?;
                let tunnel_cation = match fields.get(3) {
                    None => None,
                    Some(t) => {
                        let parsed = parse_mix(t).map_err(err)?;
                        match parsed.as_slice() {
                            [(e, Some(x))] if *x > 0.0 => Some((*e, *x)),
                            _ => {
                                return Err(err(format!(
                                    "tunnel cation '{t}': write one element and its amount per \
                                     framework metal, e.g. K0.3"
                                )));
                            }
                        }
                    }
                };
                let cell = geometry::bronze_counts(kind);
                if let Some((e, x)) = tunnel_cation {
                    let most = cell.tunnel_sites as f64 / cell.metals as f64;
                    if x > most + 1e-9 {
                        return Err(err(format!(
                            "{e}{x}: the {} bronze has {} tunnel sites per framework metal, so \
                             the amount can be at most {most:.3}",
                            kind.word(),
                            fmt_amount(most)
                        )));
                    }
                }
                let cation_charge = match tunnel_cation {
                    Some((e, x)) => x * max_state(e).map_err(err)? * cell.metals as f64,
                    None => 0.0,
                };
                let charge = 2.0 * cell.oxygens as f64 - cation_charge;
                let metals = resolve_mix(&mix, Some(charge), cell.metals as f64)
                    .map_err(|message| BuildError::Charge {
                        spec: spec.to_string(),
                        message,
                    })?
                    .0;
                Ok(FrameworkSpec::Bronze {
                    kind,
                    metals,
                    tunnel_cation,
                })
            }
            other => Err(err(format!(
                "'{other}' is not a framework type: use block:... or bronze:..."
            ))),
        }
    }

    /// The compact text form, read back by [`FrameworkSpec::parse`] to the same spec.
    pub fn to_text(&self) -> String {
        match self {
            FrameworkSpec::Block {
                n,
                m,
                join,
                octahedral,
                tetrahedral,
            } => {
                let mut s = format!(
                    "block:{n}x{m}:{}:{}",
                    match join {
                        BlockJoin::Ribbon => "ribbon",
                        BlockJoin::Tetrahedral => "tet",
                    },
                    mix_text(octahedral)
                );
                if let Some(t) = tetrahedral {
                    let _ = write!(s, ":{}", mix_text(t));
                }
                s
            }
            FrameworkSpec::Bronze {
                kind,
                metals,
                tunnel_cation,
            } => {
                let mut s = format!("bronze:{}:{}", kind.word(), mix_text(metals));
                if let Some((e, x)) = tunnel_cation {
                    let _ = write!(s, ":{e}{}", fmt_amount(*x));
                }
                s
            }
        }
    }

    /// A short name for tables: "3x3 ribbon Ti1Nb2", "3x4 tet Nb12 W", "hexagonal bronze K0.3 W".
    pub fn label(&self) -> String {
        match self {
            FrameworkSpec::Block {
                n,
                m,
                join,
                octahedral,
                tetrahedral,
            } => match (join, tetrahedral) {
                (BlockJoin::Tetrahedral, Some(t)) => {
                    format!("{n}x{m} tet {} + {}", mix_text(octahedral), mix_text(t))
                }
                _ => format!("{n}x{m} ribbon {}", mix_text(octahedral)),
            },
            FrameworkSpec::Bronze {
                kind,
                metals,
                tunnel_cation,
            } => {
                let mut s = format!("{} bronze ", kind.word());
                if let Some((e, x)) = tunnel_cation {
                    let _ = write!(s, "{e}{} ", fmt_amount(*x));
                }
                s.push_str(&mix_text(metals));
                s
            }
        }
    }
}

/// Oxygens per block of a block phase: `3nm - (n + m)` for ribbons, four more with the
/// tetrahedral join (TiNb2O7: 3 x 3 gives M9O21 = Ti3Nb6O21; Nb12WO33: 3 x 4 gives 29 + 4 = 33).
pub fn block_oxygens(n: u32, m: u32, join: BlockJoin) -> u32 {
    let base = 3 * n * m - (n + m);
    match join {
        BlockJoin::Ribbon => base,
        BlockJoin::Tetrahedral => base + 4,
    }
}

fn parse_size(text: &str) -> Result<(u32, u32), String> {
    let parts: Vec<&str> = text.split(['x', 'X']).collect();
    let bad = || format!("block size '{text}': write NxM with N and M from 2 to 8, e.g. 3x4");
    if parts.len() != 2 {
        return Err(bad());
    }
    let n: u32 = parts[0].trim().parse().map_err(|_| bad())?;
    let m: u32 = parts[1].trim().parse().map_err(|_| bad())?;
    if !(2..=8).contains(&n) || !(2..=8).contains(&m) {
        return Err(bad());
    }
    Ok((n, m))
}

/// `Ti1Nb2` -> [(Ti, Some(1)), (Nb, Some(2))]; `Nb,W` -> [(Nb, None), (W, None)]; `Nb` ->
/// [(Nb, None)].
fn parse_mix(text: &str) -> Result<Vec<(Element, Option<f64>)>, String> {
    let t = text.trim();
    if t.is_empty() {
        return Err("empty list of metals".into());
    }
    let mut out: Vec<(Element, Option<f64>)> = Vec::new();
    let push = |out: &mut Vec<(Element, Option<f64>)>, e: Element| -> Result<(), String> {
        if out.iter().any(|(x, _)| *x == e) {
            return Err(format!("'{t}' names {e} twice"));
        }
        Ok(())
    };
    if t.contains(',') {
        for sym in t.split(',') {
            let e = Element::from_symbol(sym.trim())
                .ok_or_else(|| format!("'{}' in '{t}' is not an element symbol", sym.trim()))?;
            push(&mut out, e)?;
            out.push((e, None));
        }
        return Ok(out);
    }
    let chars: Vec<char> = t.chars().collect();
    let mut i = 0;
    while i < chars.len() {
        if !chars[i].is_ascii_uppercase() {
            return Err(format!(
                "'{t}': write metals as element symbols with amounts, e.g. Ti1Nb2 or Nb,W"
            ));
        }
        let mut sym = chars[i].to_string();
        i += 1;
        if i < chars.len() && chars[i].is_ascii_lowercase() {
            sym.push(chars[i]);
            i += 1;
        }
        let e = Element::from_symbol(&sym)
            .ok_or_else(|| format!("'{sym}' in '{t}' is not an element symbol"))?;
        let start = i;
        while i < chars.len() && (chars[i].is_ascii_digit() || chars[i] == '.') {
            i += 1;
        }
        let num: String = chars[start..i].iter().collect();
        let amount = if num.is_empty() {
            None
        } else {
            let x: f64 = num
                .parse()
                .map_err(|_| format!("'{num}' in '{t}' is not an amount"))?;
            if !(x > 0.0 && x.is_finite()) {
                return Err(format!("amount {num} of {e} in '{t}' must be positive"));
            }
            Some(x)
        };
        push(&mut out, e)?;
        out.push((e, amount));
    }
    if out.len() > 1 && out.iter().any(|(_, a)| a.is_none()) {
        return Err(format!(
            "'{t}': give every metal an amount (Ti1Nb2), or none (Nb,W) to balance the charge"
        ));
    }
    Ok(out)
}

/// The highest common positive oxidation state of a metal (v.u.).
pub fn max_state(e: Element) -> Result<f64, String> {
    e.common_oxidation_states()
        .iter()
        .copied()
        .filter(|q| *q > 0)
        .max()
        .map(f64::from)
        .ok_or_else(|| format!("{e} has no common positive oxidation state"))
}

fn min_state(e: Element) -> f64 {
    e.known_oxidation_states()
        .iter()
        .copied()
        .filter(|q| *q > 0)
        .min()
        .map(f64::from)
        .unwrap_or(0.0)
}

/// Shares of a mix (adding up to 1) and the total charge of `sites` sites holding it. With a
/// `charge` to meet: amounts given must meet it at the highest states; no amounts and one metal:
/// its average valence is `charge / sites`; no amounts and two metals: the shares that meet it.
fn resolve_mix(
    mix: &[(Element, Option<f64>)],
    charge: Option<f64>,
    sites: f64,
) -> Result<(Mix, f64), String> {
    let states: Vec<f64> = mix
        .iter()
        .map(|(e, _)| max_state(*e))
        .collect::<Result<_, _>>()?;
    let given = mix.iter().all(|(_, a)| a.is_some());
    let name = mix
        .iter()
        .map(|(e, _)| e.symbol())
        .collect::<Vec<_>>()
        .join(",");
    if given || charge.is_none() {
        let shares = normalise(mix.iter().map(|(e, a)| (*e, a.unwrap_or(1.0))).collect());
        let total: f64 = shares
            .iter()
            .zip(&states)
            .map(|((_, s), q)| s * q)
            .sum::<f64>()
            * sites;
        if let Some(c) = charge
            && (total - c).abs() > 1e-6 * c.max(1.0)
        {
            let need = c / sites;
            let mut hint = String::new();
            if mix.len() == 2 && (states[0] - states[1]).abs() > 1e-9 {
                let x = (need - states[1]) / (states[0] - states[1]);
                if (0.0..=1.0).contains(&x) {
                    let _ = write!(
                        hint,
                        "; {}{}{}{} balances it (or write {name} to have it found)",
                        mix[0].0,
                        fmt_amount(x * sites),
                        mix[1].0,
                        fmt_amount((1.0 - x) * sites)
                    );
                }
            }
            return Err(format!(
                "the sites need an average valence of {} but {} at {} gives {}{hint}",
                fmt_amount(need),
                mix_text(&shares),
                states
                    .iter()
                    .zip(&shares)
                    .map(|(q, (e, _))| format!("{e}{}+", fmt_amount(*q)))
                    .collect::<Vec<_>>()
                    .join(", "),
                fmt_amount(total / sites)
            ));
        }
        return Ok((shares, total));
    }
    let c = charge.unwrap_or(0.0);
    let need = c / sites;
    match mix {
        [(e, None)] => {
            let (lo, hi) = (min_state(*e), states[0]);
            if need > hi + 1e-9 || need < lo - 1e-9 {
                return Err(format!(
                    "{e} would need an average valence of {} on these sites, outside its \
                     states {}+ to {}+",
                    fmt_amount(need),
                    fmt_amount(lo),
                    fmt_amount(hi)
                ));
            }
            Ok((vec![(*e, 1.0)], c))
        }
        [(a, None), (b, None)] => {
            let (qa, qb) = (states[0], states[1]);
            if (qa - qb).abs() < 1e-9 {
                return Err(format!(
                    "{a} and {b} have the same highest state ({}+): give their amounts, e.g. \
                     {a}1{b}1",
                    fmt_amount(qa)
                ));
            }
            let x = (need - qb) / (qa - qb);
            if !(-1e-9..=1.0 + 1e-9).contains(&x) {
                return Err(format!(
                    "no mix of {a}{}+ and {b}{}+ gives the average valence {} these sites need",
                    fmt_amount(qa),
                    fmt_amount(qb),
                    fmt_amount(need)
                ));
            }
            let x = x.clamp(0.0, 1.0);
            let shares: Mix = [(*a, x), (*b, 1.0 - x)]
                .into_iter()
                .filter(|(_, s)| *s > 1e-12)
                .collect();
            Ok((shares, c))
        }
        _ => Err(format!(
            "'{name}': with three or more metals give their amounts (e.g. Ti1Nb1W1)"
        )),
    }
}

fn normalise(mix: Mix) -> Mix {
    let total: f64 = mix.iter().map(|(_, s)| s).sum();
    mix.into_iter().map(|(e, s)| (e, s / total)).collect()
}

/// A mix written with the smallest whole amounts that give its shares within 1e-6 (`Ti1Nb2`),
/// or decimals.
fn mix_text(mix: &Mix) -> String {
    if let [(e, _)] = mix.as_slice() {
        return e.symbol().to_string();
    }
    for den in 1..=60u32 {
        let counts: Vec<f64> = mix.iter().map(|(_, s)| s * den as f64).collect();
        if counts
            .iter()
            .all(|c| (c - c.round()).abs() < 1e-6 && c.round() >= 1.0)
        {
            let g = counts
                .iter()
                .fold(0u64, |g, c| gcd(g, c.round() as u64))
                .max(1);
            return mix
                .iter()
                .zip(&counts)
                .map(|((e, _), c)| format!("{e}{}", c.round() as u64 / g))
                .collect();
        }
    }
    mix.iter()
        .map(|(e, s)| format!("{e}{}", fmt_amount(*s)))
        .collect()
}

fn gcd(a: u64, b: u64) -> u64 {
    if b == 0 { a } else { gcd(b, a % b) }
}

/// A number with at most four decimals, trailing zeros dropped.
pub(crate) fn fmt_amount(x: f64) -> String {
    let s = format!("{x:.4}");
    s.trim_end_matches('0').trim_end_matches('.').to_string()
}

/// Builds the framework of `spec`: ideal octahedra, then (unless `options.refine` is false) a
/// bond-valence refinement of every free coordinate and the cell.
pub fn build(spec: &FrameworkSpec, options: &BuildOptions) -> Result<BuiltFramework, BuildError> {
    let ideal = geometry::ideal(spec, options)?;
    refine::finish(spec, ideal, options)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn el(s: &str) -> Element {
        Element::from_symbol(s).unwrap()
    }

    #[test]
    fn specs_read_and_write_back() {
        for text in [
            "block:3x3:ribbon:Ti1Nb2",
            "block:3x4:tet:Nb:W",
            "block:3x3:tet:Nb:P",
            "bronze:hexagonal:W:K0.3",
            "bronze:tetragonal:W",
            "bronze:intergrowth:W:Rb0.1",
        ] {
            let s = FrameworkSpec::parse(text).unwrap();
            assert_eq!(s.to_text(), text);
            assert_eq!(FrameworkSpec::parse(&s.to_text()).unwrap(), s);
        }
    }

    /// TiNb2O7 is M9O21 per 3 x 3 block: 42 = 9 x 4.667, so Ti and Nb in the ratio 1:2 (Wadsley
    /// 1961, from memory); `Ti,Nb` finds that ratio and `Ti1Nb1` is refused with it.
    #[test]
    fn charge_balance_finds_or_refuses_the_ratio() {
        let s = FrameworkSpec::parse("block:3x3:ribbon:Ti,Nb").unwrap();
        let FrameworkSpec::Block { octahedral, .. } = &s else {
            panic!()
        };
        assert_eq!(octahedral[0].0, el("Ti"));
        assert!((octahedral[0].1 - 1.0 / 3.0).abs() < 1e-12);
        assert_eq!(s.to_text(), "block:3x3:ribbon:Ti1Nb2");
        let e = FrameworkSpec::parse("block:3x3:ribbon:Ti1Nb1").unwrap_err();
        let msg = e.to_string();
        assert!(msg.contains("block:3x3:ribbon:Ti1Nb1"), "{msg}");
        assert!(msg.contains("Ti3Nb6"), "{msg}");
        // Nb12WO33 (3 x 4, tetrahedral W6+): 12 Nb5+ + W6+ = 66 = 2 x 33.
        assert!(FrameworkSpec::parse("block:3x4:tet:Nb:W").is_ok());
        // K0.3WO3: W takes 6 - 0.3 = 5.7+ on average.
        assert!(FrameworkSpec::parse("bronze:hexagonal:W:K0.3").is_ok());
        // The hexagonal bronze has one tunnel site per three W.
        assert!(FrameworkSpec::parse("bronze:hexagonal:W:K0.5").is_err());
    }

    #[test]
    fn bad_specs_are_refused_with_the_spec_named() {
        for text in [
            "",
            "block",
            "block:3:ribbon:Nb",
            "block:3x9:ribbon:Nb",
            "block:3x3:sideways:Nb",
            "block:3x3:ribbon:Xx",
            "block:3x3:ribbon:Ti1Nb",
            "block:3x3:tet:Nb",
            "bronze:round:W",
            "bronze:hexagonal:W:K",
            "bronze:hexagonal:Nb,W,Mo",
        ] {
            let e = FrameworkSpec::parse(text).unwrap_err();
            assert!(e.to_string().contains(&format!("'{}'", text.trim())), "{e}");
        }
    }
}

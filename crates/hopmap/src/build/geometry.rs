//! The ideal frameworks: octahedra of one metal-oxygen distance on a grid.

use super::{BronzeKind, BuildError, BuildOptions, FrameworkSpec};

/// Sites per cell of a bronze framework.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BronzeCounts {
    pub metals: u32,
    pub oxygens: u32,
    /// Tunnel sites a cation can take (the large tunnels).
    pub tunnel_sites: u32,
}

/// Metals, oxygens and tunnel sites per cell of each bronze.
pub fn bronze_counts(kind: BronzeKind) -> BronzeCounts {
    match kind {
        BronzeKind::Hexagonal => BronzeCounts {
            metals: 3,
            oxygens: 9,
            tunnel_sites: 1,
        },
        BronzeKind::Tetragonal => BronzeCounts {
            metals: 10,
            oxygens: 30,
            tunnel_sites: 6,
        },
        BronzeKind::Intergrowth => BronzeCounts {
            metals: 10,
            oxygens: 30,
            tunnel_sites: 1,
        },
    }
}

/// The ideal framework of a spec.
pub struct Ideal {}

pub fn ideal(spec: &FrameworkSpec, _options: &BuildOptions) -> Result<Ideal, BuildError> {
    Err(BuildError::Build {
        spec: spec.to_text(),
        message: "not built yet".into(),
    })
}

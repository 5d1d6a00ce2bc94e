//! `hopmap neb` (the images of one hop for a NEB calculation) and `hopmap populate` (the host
//! with the ion placed on its lowest sites): hand-off to first-principles calculations.

use super::analyse::{ModelArgs, RateArgsCommon, options};
use super::{CmdResult, Failure, GlobalOpts, InputArgs};
use clap::{Args, ValueEnum};
use hopmap::analysis::{self, Analysis};
use hopmap::handoff::{self, HopChoice, Mode, NebOptions, PopulateOptions};
use hopmap_report::handoff as files;
use std::path::{Path, PathBuf};

#[derive(ValueEnum, Debug, Clone, Copy)]
pub enum ModeArg {
    /// The file's ions stay; the moving ion hops between two of their sites (one taken out)
    Vacancy,
    /// One ion alone in the host without the mobile element (the dilute limit)
    Interstitial,
}

#[derive(Args, Debug)]
pub struct NebArgs {
    #[command(flatten)]
    pub input: InputArgs,
    #[command(flatten)]
    pub model: ModelArgs,
    /// Hop of the site network to hand on, by its index in `hops[]` of `paths --json`
    /// (default: the rate-limiting pass of the lowest channel)
    #[arg(long, value_name = "N", conflicts_with = "channel")]
    pub hop: Option<usize>,
    /// The rate-limiting pass of the channel network of this dimension (1, 2 or 3) instead of
    /// the lowest one
    #[arg(long, value_name = "D", value_parser = clap::value_parser!(u8).range(1..=3))]
    pub channel: Option<u8>,
    /// Vacancy or interstitial hop (default: vacancy when the file holds the ion, else
    /// interstitial)
    #[arg(long, value_enum)]
    pub mode: Option<ModeArg>,
    /// Smallest distance between periodic images of the moving ion, A (sets the supercell)
    #[arg(long, default_value_t = handoff::DEFAULT_MIN_IMAGE_A, value_name = "A")]
    pub min_image_distance: f64,
    /// Intermediate images between the two end points
    #[arg(long, default_value_t = handoff::DEFAULT_IMAGES, value_name = "N")]
    pub images: usize,
    /// Output folder (default: neb-<file stem>)
    #[arg(long, value_name = "DIR")]
    pub out: Option<PathBuf>,
    /// A machine-learned second opinion (mlip.json from the Python extra `hopmap.mlip`) to
    /// print beside the bond-valence barrier and fold into neb.json
    #[arg(long, value_name = "JSON")]
    pub mlip_result: Option<PathBuf>,
    /// Print neb.json on stdout instead of the summary
    #[arg(long)]
    pub json: bool,
}

#[derive(Args, Debug)]
pub struct PopulateArgs {
    #[command(flatten)]
    pub input: InputArgs,
    #[command(flatten)]
    pub model: ModelArgs,
    /// Ions per formula unit of the host (the structure without the ion), e.g. 1.5
    #[arg(long, value_name = "X")]
    pub x: f64,
    /// Smallest distance between two placed ions, A
    #[arg(long, default_value_t = handoff::DEFAULT_MIN_ION_DISTANCE_A, value_name = "A")]
    pub min_distance: f64,
    /// Output file stem: writes STEM.cif, STEM.vasp and STEM.json (default:
    /// <file stem>-<ion><x>)
    #[arg(long, value_name = "STEM")]
    pub out: Option<PathBuf>,
    /// Print the JSON summary on stdout instead of the table
    #[arg(long)]
    pub json: bool,
}

fn analyse(g: &GlobalOpts, input: &InputArgs, model: &ModelArgs) -> Result<Analysis, Failure> {
    let opts = options(g, model, &RateArgsCommon::default())?;
    let s = input.read()?;
    analysis::analyse(&s, &opts)
        .map_err(|e| Failure::Analysis(format!("{}: {e}", input.file.display())))
}

fn stem(p: &Path) -> String {
    p.file_stem()
        .and_then(|s| s.to_str())
        .unwrap_or("structure")
        .to_string()
}

/// Reads a machine-learned result and checks that it is one.
fn read_mlip(p: &Path) -> Result<serde_json::Value, Failure> {
    let text = std::fs::read_to_string(p)
        .map_err(|e| Failure::Analysis(format!("cannot read {}: {e}", p.display())))?;
    let v: serde_json::Value = serde_json::from_str(&text).map_err(|e| {
        Failure::Analysis(format!(
            "{}: line {}, column {}: not JSON: {e}",
            p.display(),
            e.line(),
            e.column()
        ))
    })?;
    let schema = v.get("schema").and_then(|s| s.as_str()).unwrap_or("");
    if schema != files::MLIP_SCHEMA {
        return Err(Failure::Analysis(format!(
            "{}: schema '{schema}' is not {} (the file `hopmap.mlip` writes)",
            p.display(),
            files::MLIP_SCHEMA
        )));
    }
    if v.get("barrier_ev").and_then(|b| b.as_f64()).is_none() {
        return Err(Failure::Analysis(format!(
            "{}: no number under 'barrier_ev'",
            p.display()
        )));
    }
    Ok(v)
}

pub fn run_neb(g: &GlobalOpts, a: NebArgs) -> CmdResult {
    if !(a.min_image_distance > 0.0 && a.min_image_distance <= 100.0) {
        return Err(Failure::Usage(format!(
            "--min-image-distance {} A must lie between 0 and 100 A",
            a.min_image_distance
        )));
    }
    if a.images == 0 || a.images > 99 {
        return Err(Failure::Usage(format!(
            "--images {} must lie between 1 and 99",
            a.images
        )));
    }
    let mlip = a.mlip_result.as_deref().map(read_mlip).transpose()?;
    let an = analyse(g, &a.input, &a.model)?;
    if let (Some(m), Some(p)) = (&mlip, &a.mlip_result) {
        let ion = m.get("ion").and_then(|v| v.as_str()).unwrap_or("");
        if ion != an.ion.symbol() {
            return Err(Failure::Analysis(format!(
                "{}: the result is for ion '{ion}', not {}",
                p.display(),
                an.ion
            )));
        }
    }
    let o = NebOptions {
        choice: match a.hop {
            Some(i) => HopChoice::Hop(i),
            None => HopChoice::Channel(a.channel),
        },
        mode: a.mode.map(|m| match m {
            ModeArg::Vacancy => Mode::Vacancy,
            ModeArg::Interstitial => Mode::Interstitial,
        }),
        min_image_a: a.min_image_distance,
        images: a.images,
    };
    let file = a.input.file.display().to_string();
    let setup =
        handoff::neb_setup(&an, &o).map_err(|e| Failure::Analysis(format!("{file}: {e}")))?;
    let dir = a
        .out
        .clone()
        .unwrap_or_else(|| PathBuf::from(format!("neb-{}", stem(&a.input.file))));
    let fs = files::neb_files(&setup, &file, mlip.as_ref());
    files::write_files(&dir, &fs)
        .map_err(|e| Failure::Analysis(format!("cannot write into {}: {e}", dir.display())))?;
    if a.json {
        let doc = files::neb_json(&setup, &file, mlip.as_ref());
        outln!(
            "{}",
            serde_json::to_string_pretty(&doc).map_err(|e| e.to_string())?
        );
    } else {
        out!("{}", files::neb_text(&setup, &file, &dir, mlip.as_ref()));
    }
    Ok(())
}

pub fn run_populate(g: &GlobalOpts, a: PopulateArgs) -> CmdResult {
    if !(a.x > 0.0 && a.x.is_finite()) {
        return Err(Failure::Usage(format!(
            "--x {} must be a positive number of ions per formula unit",
            a.x
        )));
    }
    if !(a.min_distance >= 0.0 && a.min_distance < 50.0) {
        return Err(Failure::Usage(format!(
            "--min-distance {} A must lie between 0 and 50 A",
            a.min_distance
        )));
    }
    let an = analyse(g, &a.input, &a.model)?;
    let file = a.input.file.display().to_string();
    let p = handoff::populate(
        &an,
        &PopulateOptions {
            x: a.x,
            min_distance_a: a.min_distance,
        },
    )
    .map_err(|e| Failure::Analysis(format!("{file}: {e}")))?;
    let stem_path = a.out.clone().unwrap_or_else(|| {
        PathBuf::from(format!(
            "{}-{}{}",
            stem(&a.input.file),
            an.ion.symbol(),
            a.x
        ))
    });
    let with_ext = |ext: &str| {
        let mut s = stem_path.as_os_str().to_owned();
        s.push(ext);
        PathBuf::from(s)
    };
    let doc = files::populate_json(&p, &file, an.ion);
    let comment = format!(
        "hopmap populate {file}: {} x = {} on {}",
        an.ion.symbol(),
        p.x,
        p.host_formula
    );
    let outputs = vec![
        (
            with_ext(".cif"),
            hopmap_report::write_cif::to_cif_p1(&p.structure),
        ),
        (with_ext(".vasp"), files::poscar_of(&p.structure, &comment)),
        (
            with_ext(".json"),
            serde_json::to_string_pretty(&doc).map_err(|e| e.to_string())? + "\n",
        ),
    ];
    let written = files::write_files(Path::new(""), &outputs)
        .map_err(|e| Failure::Analysis(format!("cannot write {}: {e}", stem_path.display())))?;
    if a.json {
        outln!(
            "{}",
            serde_json::to_string_pretty(&doc).map_err(|e| e.to_string())?
        );
    } else {
        out!("{}", files::populate_text(&p, &file, an.ion, &written));
    }
    Ok(())
}

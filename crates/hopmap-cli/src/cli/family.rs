//! `hopmap family`: the main job over a set of frameworks and one ranked report.

use super::analyse::{ModelArgs, RateArgsCommon, options};
use super::{CmdResult, Failure, GlobalOpts};
use clap::Args;
use hopmap::family::{self, MemberInput, MemberKind, MemberSource};
use std::path::{Path, PathBuf};

#[derive(Args, Debug)]
pub struct FamilyArgs {
    /// Members: structure files (CIF, POSCAR, extended XYZ) or frameworks to build, written as
    /// for `hopmap build` (block:3x4:tet:Nb:W, bronze:hexagonal:W); each optionally named
    /// LABEL=MEMBER. A label written NxM (e.g. 3x3=TiNb2O7.cif) marks a file as a block phase of
    /// n x m octahedra for the block-size figure
    #[arg(required = true, value_name = "MEMBER")]
    pub members: Vec<String>,
    #[command(flatten)]
    pub model: ModelArgs,
    /// Output folder: family.html, family.json, family.csv and one report per member
    #[arg(long, value_name = "DIR")]
    pub out: PathBuf,
    /// Print the JSON document (schema hopmap.family/1) on stdout instead of the table
    #[arg(long)]
    pub json: bool,
    /// Write only the family's own files, not a report per member (and a CIF per built member)
    #[arg(long)]
    pub no_member_reports: bool,
}

/// Extensions read as structure files.
const STRUCTURE_EXTENSIONS: [&str; 5] = ["cif", "vasp", "poscar", "contcar", "xyz"];

/// True when `text` names a file rather than something to build: it exists, or it looks like a
/// path (a folder separator or a structure-file extension).
fn looks_like_file(text: &str) -> bool {
    let p = Path::new(text);
    p.exists()
        || text.contains('/')
        || text.contains(std::path::MAIN_SEPARATOR)
        || p.extension()
            .and_then(|e| e.to_str())
            .is_some_and(|e| STRUCTURE_EXTENSIONS.contains(&e.to_ascii_lowercase().as_str()))
        || p.file_name()
            .and_then(|n| n.to_str())
            .is_some_and(|n| n.starts_with("POSCAR") || n.starts_with("CONTCAR"))
}

/// Splits `LABEL=WHAT` (a label has no folder separator and the whole text is not a file).
fn split_label(text: &str) -> (Option<&str>, &str) {
    if Path::new(text).exists() {
        return (None, text);
    }
    match text.split_once('=') {
        Some((l, rest)) if !l.is_empty() && !l.contains('/') && !rest.is_empty() => {
            (Some(l.trim()), rest)
        }
        _ => (None, text),
    }
}

/// One member from its command-line text.
fn member(text: &str) -> MemberInput {
    let (label, what) = split_label(text);
    if !looks_like_file(what) {
        let mut m = MemberInput::from_spec(what, label);
        if let Some(k) = label.and_then(MemberKind::parse_block) {
            m.kind = k;
        }
        return m;
    }
    let kind = label
        .and_then(MemberKind::parse_block)
        .unwrap_or(MemberKind::Other);
    let stem = Path::new(what)
        .file_stem()
        .and_then(|s| s.to_str())
        .unwrap_or(what)
        .to_string();
    MemberInput {
        label: label.map(str::to_string).unwrap_or(stem),
        kind,
        origin: what.to_string(),
        source: MemberSource::File(PathBuf::from(what)),
    }
}

/// Gives repeated labels a suffix (-2, -3, ...) so that every member has its own report file.
fn unique_labels(members: &mut [MemberInput]) {
    let mut seen: Vec<String> = Vec::new();
    for m in members.iter_mut() {
        let mut l = m.label.clone();
        let mut k = 2;
        while seen.contains(&l) {
            l = format!("{}-{k}", m.label);
            k += 1;
        }
        seen.push(l.clone());
        m.label = l;
    }
}

pub fn run(g: &GlobalOpts, a: FamilyArgs) -> CmdResult {
    // one progress bar per member would interleave; the family reports its own progress
    let quiet = GlobalOpts {
        quiet: true,
        ..g.clone()
    };
    let opts = options(&quiet, &a.model, &RateArgsCommon::default())?;
    if a.out.is_file() {
        return Err(Failure::Usage(format!(
            "--out {} is a file; give a folder",
            a.out.display()
        )));
    }
    super::prepare_output_dir(&a.out)?;
    let mut inputs: Vec<MemberInput> = a.members.iter().map(|t| member(t)).collect();
    unique_labels(&mut inputs);
    let bar = if g.quiet {
        indicatif::ProgressBar::hidden()
    } else {
        let b = indicatif::ProgressBar::new(inputs.len() as u64);
        if let Ok(style) = indicatif::ProgressStyle::with_template(
            "{bar:40} {pos}/{len} members analysed  {elapsed} (eta {eta})  {msg}",
        ) {
            b.set_style(style);
        }
        b
    };
    let study = family::study_reporting(inputs, &opts, &|m| {
        bar.set_message(m.label.clone());
        bar.inc(1);
    });
    bar.finish_and_clear();
    let reports = !a.no_member_reports;
    // every file's contents first, then the writes (each atomic)
    let mut files: Vec<(PathBuf, Vec<u8>)> = Vec::new();
    let doc = hopmap_report::family::json(&study, reports);
    let json_text = serde_json::to_string_pretty(&doc).map_err(|e| e.to_string())? + "\n";
    files.push((
        a.out.join("family.html"),
        hopmap_report::family::html(&study, reports).into_bytes(),
    ));
    files.push((a.out.join("family.json"), json_text.clone().into_bytes()));
    files.push((
        a.out.join("family.csv"),
        hopmap_report::family::csv(&study)
            .map_err(|e| e.to_string())?
            .into_bytes(),
    ));
    if reports {
        for m in &study.members {
            if let Ok(r) = &m.result {
                files.push((
                    a.out.join(hopmap_report::family::member_report_name(m)),
                    hopmap_report::html::report(&r.analysis, &m.origin).into_bytes(),
                ));
                if m.built.is_some() {
                    files.push((
                        a.out.join(hopmap_report::family::member_cif_name(m)),
                        hopmap_report::write_cif::to_cif_p1(&r.analysis.structure).into_bytes(),
                    ));
                }
            }
        }
    }
    for (p, bytes) in &files {
        super::write_atomic(p, bytes).map_err(|e| format!("cannot write {}: {e}", p.display()))?;
    }
    if a.json {
        out!("{json_text}");
    } else {
        out!("{}", hopmap_report::family::terminal(&study));
    }
    if !g.quiet {
        eprintln!(
            "family report written to {} ({} files)",
            a.out.join("family.html").display(),
            files.len()
        );
    }
    let answered = study.answered().count();
    if answered == 0 {
        return Err(Failure::Analysis(
            "no member of the family could be analysed".into(),
        ));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn labels_and_block_sizes_come_from_the_member_text() {
        let m = member("3x4=no/such/dir/x.cif");
        assert_eq!(m.label, "3x4");
        assert_eq!(m.kind, MemberKind::Block { n: 3, m: 4 });
        assert!(matches!(m.source, MemberSource::File(_)));
        let m = member("structures/none.cif");
        assert_eq!(m.label, "none");
        assert_eq!(m.kind, MemberKind::Other);
        let m = member("bronze:hexagonal:W");
        assert_eq!(m.kind, MemberKind::Tunnel("hexagonal bronze".into()));
        assert!(matches!(m.source, MemberSource::Spec(_)));
        let m = member("odd=block:3x9:ribbon:Nb");
        assert_eq!(m.label, "odd");
        assert!(matches!(m.source, MemberSource::Failed(_)));
        let mut v = vec![member("a.cif"), member("b/a.cif")];
        unique_labels(&mut v);
        assert_eq!((v[0].label.as_str(), v[1].label.as_str()), ("a", "a-2"));
    }
}

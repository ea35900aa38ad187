//! The commands: `run`, `check`, `verify`, `compare`, `init`. Reads inputs, calls the pipeline, writes
//! outputs atomically (everything goes to a temporary folder that is renamed into place).

use std::io::Write;
use std::path::{Component, Path, PathBuf};

use serde_json::Value;

use crate::analysis::{self, Analysis};
use crate::cli::Command;
use crate::compare::{self, Tolerance};
use crate::data;
use crate::error::{Error, Result, EXIT_CHECK_FAILED, EXIT_OK};
use crate::outputs;
use crate::provenance;
use crate::spec::{self, Study};

/// Names of the files `run` writes, in manifest order.
pub const OUTPUT_FILES: [&str; 5] = ["report.html", "results.json", "rows.csv", "study.resolved.yaml", "rerun.json"];

/// Print to stdout, ignoring a closed pipe.
fn say(text: &str) {
    let mut out = std::io::stdout().lock();
    let _ = out.write_all(text.as_bytes());
    let _ = out.flush();
}

pub fn execute(command: Command) -> Result<u8> {
    match command {
        Command::Run { spec, out, strict, quiet } => run(&spec, out.as_deref(), strict, quiet),
        Command::Check { spec } => check(&spec),
        Command::Verify { dir, data } => verify(&dir, data.as_deref()),
        Command::Compare { a, b, rtol, atol } => compare_cmd(&a, &b, Tolerance { rtol, atol }),
        Command::Init { data, response } => init(&data, response.as_deref()),
    }
}

/// Load the data of a study, enforcing the spec's sha256 pin.
pub fn load_frame(study: &Study, spec_display: &str) -> Result<data::Frame> {
    let frame = data::load(&analysis::frame_request(study))?;
    if let Some(pin) = &study.data.sha256 {
        if *pin != frame.sha256 {
            return Err(Error::new(format!(
                "the data file's sha256 does not match the pin in the spec\n    pinned:   {pin}\n    computed: {}",
                frame.sha256
            ))
            .at(format!("{spec_display}, key data.sha256"))
            .hint(
                "the data changed since the spec was pinned: restore the original file, or update the pin after review",
            ));
        }
    }
    Ok(frame)
}

/// Every output of a run: the files in memory, except rows.csv, which is written from `analysis` as
/// a stream (it is the one output that grows with the data).
pub struct RunOutputs {
    pub analysis: Analysis,
    pub results: crate::results::Results,
    pub files: Vec<(String, Vec<u8>)>,
}

/// Where an output file's bytes come from.
pub enum FileContent<'a> {
    Bytes(&'a [u8]),
    /// rows.csv of this analysis, formatted while it is written.
    Rows(&'a Analysis),
}

impl RunOutputs {
    /// The files of a run in manifest order ([`OUTPUT_FILES`]); an error if one is missing (a bug, but
    /// never a silently incomplete output folder).
    pub fn contents(&self) -> Result<Vec<(&str, FileContent<'_>)>> {
        OUTPUT_FILES
            .iter()
            .map(|&name| {
                if name == "rows.csv" {
                    return Ok((name, FileContent::Rows(&self.analysis)));
                }
                self.files
                    .iter()
                    .find(|(n, _)| n == name)
                    .map(|(_, b)| (name, FileContent::Bytes(b.as_slice())))
                    .ok_or_else(|| Error::new(format!("internal: the output {name} was not produced")))
            })
            .collect()
    }
}

/// Run the whole study in memory. `spec_dir_from_out` is written into rerun.json.
pub fn compute(
    study: Study,
    spec_bytes: &[u8],
    spec_display: &str,
    rerun_json: String,
    progress: &dyn Fn(usize, usize),
) -> Result<RunOutputs> {
    use crate::robust::profile::stage;
    let resolved = study.to_resolved_yaml();
    let t = stage(|| "read the data".into());
    let frame = load_frame(&study, spec_display)?;
    drop(t);
    let t = stage(|| "analysis (selection and sensitivity)".into());
    let analysis = analysis::analyse_with_progress(study, frame, spec_display, progress)?;
    drop(t);
    let t = stage(|| "results.json".into());
    let results = outputs::results(&analysis, &outputs::Inputs { spec_bytes, resolved_yaml: &resolved });
    drop(t);
    let _t = stage(|| "report".into());
    let json =
        serde_json::to_string_pretty(&results).map_err(|e| Error::new(format!("cannot write results: {e}")))? + "\n";
    let html = crate::report::render(&analysis, &results, &resolved)?;
    let files = vec![
        ("report.html".to_string(), html.into_bytes()),
        ("results.json".to_string(), json.into_bytes()),
        ("study.resolved.yaml".to_string(), resolved.into_bytes()),
        ("rerun.json".to_string(), rerun_json.into_bytes()),
    ];
    Ok(RunOutputs { analysis, results, files })
}

fn absolute(p: &Path) -> Result<PathBuf> {
    if p.is_absolute() {
        return Ok(p.to_path_buf());
    }
    let cwd = std::env::current_dir().map_err(|e| Error::io("read the working folder", Path::new("."), &e))?;
    Ok(cwd.join(p))
}

/// Lexically normalise an absolute path (remove `.` and `..`).
fn normalise(p: &Path) -> PathBuf {
    let mut out = PathBuf::new();
    for c in p.components() {
        match c {
            Component::ParentDir => {
                out.pop();
            }
            Component::CurDir => {}
            other => out.push(other.as_os_str()),
        }
    }
    out
}

/// The relative path from folder `from` to path `to` (both absolute, normalised), with `/` separators.
pub fn relative(from: &Path, to: &Path) -> String {
    let f: Vec<_> = from.components().collect();
    let t: Vec<_> = to.components().collect();
    let common = f.iter().zip(&t).take_while(|(a, b)| a == b).count();
    let mut parts: Vec<String> = vec!["..".into(); f.len() - common];
    parts.extend(t[common..].iter().map(|c| c.as_os_str().to_string_lossy().into_owned()));
    if parts.is_empty() {
        ".".into()
    } else {
        parts.join("/")
    }
}

fn default_out(spec: &Path) -> PathBuf {
    let stem = spec.file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_else(|| "study".into());
    spec.parent().unwrap_or(Path::new("")).join(format!("{stem}.out"))
}

fn read_spec(path: &Path) -> Result<(Study, Vec<u8>)> {
    let study = spec::load(path)?;
    let bytes = std::fs::read(path).map_err(|e| Error::io("read the spec", path, &e))?;
    Ok((study, bytes))
}

fn run(spec_path: &Path, out: Option<&Path>, strict: bool, quiet: bool) -> Result<u8> {
    let (study, spec_bytes) = read_spec(spec_path)?;
    let out_dir = out.map(Path::to_path_buf).unwrap_or_else(|| default_out(spec_path));
    let out_abs = normalise(&absolute(&out_dir)?);
    let data_abs = normalise(&absolute(&study.data.file)?);
    if out_abs == data_abs || out_abs == normalise(&absolute(spec_path)?) {
        return Err(Error::new("the output folder is the data or spec file itself")
            .at(out_dir.display().to_string())
            .hint("choose another folder with --out"));
    }
    if out_abs.is_file() {
        return Err(Error::new("the output path is an existing file, not a folder")
            .at(out_dir.display().to_string())
            .hint("choose another folder with --out"));
    }
    if data_abs.starts_with(&out_abs) {
        return Err(Error::new("the data file lies inside the output folder, which a run replaces")
            .at(out_dir.display().to_string())
            .hint("choose another folder with --out"));
    }
    let spec_dir = normalise(&absolute(spec_path)?).parent().map(Path::to_path_buf).unwrap_or_default();
    let rerun = serde_json::json!({
        "spec-dir": relative(&out_abs, &spec_dir),
        "spec-file": relative(&out_abs, &normalise(&absolute(spec_path)?)),
    });
    let rerun_json = serde_json::to_string_pretty(&rerun).unwrap_or_default() + "\n";
    // A progress bar on stderr for grid points × fits; hidden with --quiet or when stderr is not a terminal.
    let bar = if quiet || !std::io::IsTerminal::is_terminal(&std::io::stderr()) {
        indicatif::ProgressBar::hidden()
    } else {
        indicatif::ProgressBar::new(0).with_message("fitting the selection grid")
    };
    let progress = |done: usize, total: usize| {
        bar.set_length(total as u64);
        bar.set_position(done as u64);
    };
    let outputs = compute(study, &spec_bytes, &spec_path.display().to_string(), rerun_json, &progress);
    bar.finish_and_clear();
    let outputs = outputs?;
    let t = crate::robust::profile::stage(|| "write the outputs (rows.csv formatted on the way)".into());
    write_outputs(&out_dir, &outputs.contents()?)?;
    drop(t);
    let r = &outputs.results;
    let mut msg = format!(
        "wrote {} (report.html, results.json, rows.csv, study.resolved.yaml, rerun.json, manifest.sha256)\n",
        out_dir.display()
    );
    msg.push_str(&format!(
        "rows used {} of {}; flagged {} (expected by chance {:.1}); digest {}\n",
        r.study.n_rows_used, r.study.n_rows_read, r.outliers.n_flagged, r.outliers.expected_false, r.provenance.digest
    ));
    for w in &r.warnings {
        msg.push_str(&format!("warning: {w}\n"));
    }
    say(&msg);
    if strict && outputs::any_not_converged(&outputs.analysis) {
        eprintln!("error: a fit did not converge (--strict)");
        return Ok(EXIT_CHECK_FAILED);
    }
    Ok(EXIT_OK)
}

/// Write the files into `dir` atomically: a sibling temporary folder is filled, then renamed into place.
/// An existing `dir` is replaced only if it is empty or holds a knotwise manifest.
pub fn write_outputs(dir: &Path, files: &[(&str, FileContent<'_>)]) -> Result<()> {
    let parent = match dir.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    };
    let name = dir.file_name().map(|s| s.to_string_lossy().into_owned()).unwrap_or_else(|| "out".into());
    if dir.exists() {
        let is_ours = dir.join("manifest.sha256").is_file();
        let empty = std::fs::read_dir(dir).map(|mut d| d.next().is_none()).unwrap_or(false);
        if !is_ours && !empty {
            return Err(Error::new("the output folder exists and was not written by knotwise (no manifest.sha256)")
                .at(dir.display().to_string())
                .hint("choose an empty or new folder with --out; knotwise replaces only its own output folders"));
        }
    }
    // A parent that is a file: name the folder asked for, not the temporary one.
    let mut ancestor = parent.as_path();
    while !ancestor.exists() {
        match ancestor.parent() {
            Some(p) if !p.as_os_str().is_empty() => ancestor = p,
            _ => break,
        }
    }
    if ancestor.exists() && !ancestor.is_dir() {
        return Err(Error::new("cannot create the output folder: a parent is not a directory")
            .at(dir.display().to_string())
            .hint(format!("{} is a file; choose another folder with --out", ancestor.display())));
    }
    let tmp = parent.join(format!(".{name}.tmp-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&tmp);
    std::fs::create_dir_all(&tmp).map_err(|e| {
        Error::new(format!("cannot create the output folder: {}", crate::error::describe_io(&e)))
            .at(dir.display().to_string())
            .hint("check that the folder is writable, or choose another with --out")
    })?;
    let result = (|| -> Result<()> {
        let mut listed: Vec<(&str, String)> = Vec::new();
        for (file, content) in files {
            let path = tmp.join(file);
            let hex = match content {
                FileContent::Bytes(bytes) => {
                    std::fs::write(&path, bytes).map_err(|e| Error::io("write", &path, &e))?;
                    provenance::sha256_hex(bytes)
                }
                FileContent::Rows(analysis) => {
                    let written = (|| -> std::io::Result<String> {
                        let f = std::fs::File::create(&path)?;
                        let mut w = provenance::HashingWriter::new(std::io::BufWriter::with_capacity(1 << 20, f));
                        outputs::write_rows_csv(analysis, &mut w)?;
                        Ok(w.finish()?.1)
                    })();
                    written.map_err(|e| Error::io("write", &path, &e))?
                }
            };
            listed.push((file, hex));
        }
        let manifest = provenance::manifest(&listed);
        let mpath = tmp.join("manifest.sha256");
        std::fs::write(&mpath, manifest).map_err(|e| Error::io("write", &mpath, &e))?;
        let old = parent.join(format!(".{name}.old-{}", std::process::id()));
        if dir.exists() {
            std::fs::rename(dir, &old).map_err(|e| Error::io("replace the output folder", dir, &e))?;
        }
        if let Err(e) = std::fs::rename(&tmp, dir) {
            if old.exists() {
                let _ = std::fs::rename(&old, dir);
            }
            return Err(Error::io("move the outputs into place", dir, &e));
        }
        if old.exists() {
            let _ = std::fs::remove_dir_all(&old);
        }
        Ok(())
    })();
    if result.is_err() {
        let _ = std::fs::remove_dir_all(&tmp);
    }
    result
}

fn check(spec_path: &Path) -> Result<u8> {
    let (study, _) = read_spec(spec_path)?;
    let frame = load_frame(&study, &spec_path.display().to_string())?;
    let mut s = String::from("# resolved spec (every default filled in)\n");
    s.push_str(&study.to_resolved_yaml());
    s.push_str(&format!(
        "\n# data: {} rows read, {} used, {} dropped for missing values; sha256 {}\n",
        frame.n_read,
        frame.n_used(),
        frame.dropped.len(),
        frame.sha256
    ));
    for c in &frame.columns {
        match &c.data {
            data::ColumnData::Numeric(v) => {
                let (lo, hi) = v.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), x| (a.min(*x), b.max(*x)));
                let mut d = v.clone();
                d.sort_by(|a, b| a.total_cmp(b));
                d.dedup();
                s.push_str(&format!("#   {}: numeric, min {lo}, max {hi}, {} distinct values\n", c.name, d.len()));
            }
            data::ColumnData::Categorical { levels, counts, reference, .. } => {
                let lv: Vec<String> = levels.iter().zip(counts).map(|(l, n)| format!("{l} ({n})")).collect();
                s.push_str(&format!(
                    "#   {}: categorical, reference {}, levels {}\n",
                    c.name,
                    levels[*reference],
                    lv.join(", ")
                ));
            }
        }
    }
    for (c, n) in &frame.missing_per_column {
        s.push_str(&format!("#   missing in {c}: {n} rows\n"));
    }
    for w in &frame.warnings {
        s.push_str(&format!("# warning: {w}\n"));
    }
    say(&s);
    Ok(EXIT_OK)
}

fn read_json(path: &Path) -> Result<Value> {
    let text = std::fs::read_to_string(path).map_err(|e| {
        Error::io("read", path, &e).hint("give an output folder written by `knotwise run`, or its results.json")
    })?;
    serde_json::from_str(&text).map_err(|e| Error::new(format!("not valid JSON: {e}")).at(path.display().to_string()))
}

fn results_path(p: &Path) -> PathBuf {
    if p.is_dir() {
        p.join("results.json")
    } else {
        p.to_path_buf()
    }
}

fn compare_cmd(a: &Path, b: &Path, tol: Tolerance) -> Result<u8> {
    if !(tol.rtol >= 0.0 && tol.atol >= 0.0 && tol.rtol.is_finite() && tol.atol.is_finite()) {
        return Err(Error::new("tolerances must be finite and not negative").at("--rtol/--atol"));
    }
    let va = read_json(&results_path(a))?;
    let vb = read_json(&results_path(b))?;
    let diffs = compare::diff(&va, &vb, tol);
    let beyond = diffs.iter().filter(|d| d.beyond).count();
    let mut s = format!("A: {}\nB: {}\n", results_path(a).display(), results_path(b).display());
    if diffs.is_empty() {
        s.push_str("no differences\n");
    } else {
        s.push_str(&compare::table(&diffs));
        s.push_str(&format!(
            "{} difference(s), {beyond} beyond tolerance (rtol {}, atol {})\n",
            diffs.len(),
            tol.rtol,
            tol.atol
        ));
    }
    say(&s);
    Ok(if beyond > 0 { EXIT_CHECK_FAILED } else { EXIT_OK })
}

fn verify(dir: &Path, data_override: Option<&Path>) -> Result<u8> {
    let mut findings: Vec<String> = Vec::new();
    let mpath = dir.join("manifest.sha256");
    let manifest = std::fs::read_to_string(&mpath).map_err(|e| {
        Error::io("read the manifest", &mpath, &e).hint("verify needs a folder written by `knotwise run`")
    })?;
    let entries = provenance::parse_manifest(&manifest)
        .map_err(|line| Error::new("malformed manifest line").at(format!("{}, line {line}", mpath.display())))?;
    for (name, hex) in &entries {
        match std::fs::read(dir.join(name)) {
            Ok(bytes) if provenance::sha256_hex(&bytes) == *hex => {}
            Ok(_) => {
                findings.push(format!("{name} was edited after the run (its sha256 no longer matches manifest.sha256)"))
            }
            Err(_) => findings.push(format!("{name} is missing from the output folder")),
        }
    }
    let recorded = read_json(&dir.join("results.json"))?;
    let rerun = read_json(&dir.join("rerun.json"))?;
    let spec_dir = rerun.get("spec-dir").and_then(Value::as_str).unwrap_or(".");
    let rpath = dir.join("study.resolved.yaml");
    let resolved_text = std::fs::read_to_string(&rpath).map_err(|e| Error::io("read", &rpath, &e))?;
    let mut study = spec::parse(&resolved_text, &rpath.display().to_string(), &dir.join(spec_dir))?;
    if let Some(d) = data_override {
        study.data.file = d.to_path_buf();
        study.data.file_as_written = d.display().to_string();
    }
    let rec = |k: &str| recorded.pointer(&format!("/provenance/{k}")).and_then(Value::as_str).unwrap_or("").to_string();
    if !study.data.file.is_file() {
        return Err(Error::new(format!(
            "the recorded data file is missing\n    recorded path: {} (relative to the spec folder)\n    recorded sha256: {}",
            rec("data-file"),
            rec("data-sha256")
        ))
        .at(study.data.file.display().to_string())
        .hint("put the data file back at that path, or pass --data PATH"));
    }
    if provenance::sha256_hex(resolved_text.as_bytes()) != rec("resolved-spec-sha256") {
        findings
            .push("the recorded spec (study.resolved.yaml) differs from the one the results were computed from".into());
    }
    if let Some(sf) = rerun.get("spec-file").and_then(Value::as_str) {
        if let Ok(bytes) = std::fs::read(dir.join(sf)) {
            if provenance::sha256_hex(&bytes) != rec("spec-sha256") {
                findings.push(format!("note: the original spec file {sf} has changed since the run (verify reruns the recorded resolved spec)"));
            }
        }
    }
    if provenance::version() != rec("version") {
        findings.push(format!("tool version changed: recorded {}, now {}", rec("version"), provenance::version()));
    }
    // Recompute in memory; the pin is deliberately not enforced so a changed file can be named.
    study.data.sha256 = None;
    let display = rpath.display().to_string();
    let frame = load_frame(&study, &display)?;
    if frame.sha256 != rec("data-sha256") {
        findings.push(format!("data changed: recorded sha256 {}, now {}", rec("data-sha256"), frame.sha256));
    }
    let resolved_study = study.clone();
    let analysis = analysis::analyse(resolved_study, frame, &display)?;
    // Hash the recorded resolved spec as it is (an edit was reported above); regenerating it would drop
    // the pin that was switched off for the rerun.
    let fresh = outputs::results(&analysis, &outputs::Inputs { spec_bytes: &[], resolved_yaml: &resolved_text });
    let fresh_value = serde_json::to_value(&fresh).map_err(|e| Error::new(format!("internal: {e}")))?;
    let diffs = compare::diff(&recorded, &fresh_value, Tolerance::default());
    let beyond: Vec<&compare::Difference> = diffs.iter().filter(|d| d.beyond).collect();
    let digest_rec = rec("digest");
    // The digest covers the spec bytes' hash; verify recomputes from the resolved spec, so compare the
    // digest of the recorded results recomputed with the recorded spec hash instead.
    let mut fresh_for_digest = fresh.clone();
    fresh_for_digest.provenance.spec_sha256 = rec("spec-sha256");
    // `--data` may point at a moved copy of the same bytes; the data's identity is its sha256.
    fresh_for_digest.provenance.data_file = rec("data-file");
    let digest_rerun = outputs::digest(&fresh_for_digest);
    let mut s = String::new();
    let real_findings: Vec<&String> = findings.iter().filter(|f| !f.starts_with("note:")).collect();
    if real_findings.is_empty() && beyond.is_empty() && digest_rerun == digest_rec {
        s.push_str(&format!("verified: every digest matches\ndigest {digest_rec}\n"));
        for f in &findings {
            s.push_str(&format!("{f}\n"));
        }
        say(&s);
        return Ok(EXIT_OK);
    }
    s.push_str("NOT verified:\n");
    for f in &findings {
        s.push_str(&format!("- {f}\n"));
    }
    if digest_rerun != digest_rec {
        s.push_str(&format!("- study digest: recorded {digest_rec}, rerun {digest_rerun}\n"));
    }
    if !beyond.is_empty() {
        s.push_str("results that moved beyond tolerance:\n");
        let owned: Vec<compare::Difference> = beyond.into_iter().cloned().collect();
        s.push_str(&compare::table(&owned));
    }
    say(&s);
    Ok(EXIT_CHECK_FAILED)
}

fn init(data_path: &Path, response: Option<&str>) -> Result<u8> {
    say(&crate::init::draft_spec(data_path, response)?);
    Ok(EXIT_OK)
}

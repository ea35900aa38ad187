//! Property-style fuzzing of the two parsers that read user files, on stable Rust.
//!
//! Valid seed inputs (tests/fixtures/fuzz-corpus/ plus a few built in) are mutated by a small seeded
//! PRNG: byte flips, inserts and deletes, line deletes, duplicates and swaps, random YAML tokens and
//! random CSV cells. Every mutant goes through `knotwise::spec::parse` / `spec::load` or
//! `knotwise::data::load` (through a temp file) and `knotwise::init::draft_spec`, inside
//! `catch_unwind`. The properties:
//!
//! - nothing panics;
//! - every `Err` has a non-empty message (and a one-line location);
//! - a spec that parses writes a resolved spec that parses back to an equal `Study`;
//! - a frame that loads is consistent (column lengths, line numbers, finite numbers, sorted levels);
//! - a CSV that loads gives an `init` draft that parses as a spec.
//!
//! The run is deterministic. `KNOTWISE_FUZZ_CASES` sets the cases per target (default 2,000);
//! `KNOTWISE_FUZZ_SEED` picks another stream of mutations. A failing case is written to
//! `target/fuzz-failures/` with its case number so it can be replayed.

use std::panic::{catch_unwind, AssertUnwindSafe};
use std::path::{Path, PathBuf};

use knotwise::data::{self, ColumnData, FrameRequest};
use knotwise::spec;

/// SplitMix64 (Steele, Lea and Flood 2014): small, fast, good enough to pick mutations.
struct Rng(u64);

impl Rng {
    fn next(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }
    fn below(&mut self, n: usize) -> usize {
        if n == 0 {
            0
        } else {
            (self.next() % n as u64) as usize
        }
    }
    fn pick<'a, T>(&mut self, items: &'a [T]) -> &'a T {
        &items[self.below(items.len())]
    }
}

fn cases() -> usize {
    std::env::var("KNOTWISE_FUZZ_CASES").ok().and_then(|s| s.parse().ok()).unwrap_or(2_000)
}

fn base_seed() -> u64 {
    std::env::var("KNOTWISE_FUZZ_SEED").ok().and_then(|s| s.parse().ok()).unwrap_or(0x6b6e_6f74)
}

fn corpus(kind: &str, ext: &str, builtin: &[&str]) -> Vec<Vec<u8>> {
    let dir = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/fuzz-corpus").join(kind);
    let mut seeds: Vec<Vec<u8>> = builtin.iter().map(|s| s.as_bytes().to_vec()).collect();
    let mut files: Vec<PathBuf> =
        std::fs::read_dir(&dir).map(|d| d.filter_map(|e| e.ok().map(|e| e.path())).collect()).unwrap_or_default();
    files.sort();
    for f in files.into_iter().filter(|f| f.extension().is_some_and(|e| e == ext)) {
        seeds.push(std::fs::read(&f).unwrap_or_else(|e| panic!("{}: {e}", f.display())));
    }
    seeds
}

const YAML_TOKENS: &[&str] = &[
    ":",
    ": ",
    "- ",
    "-",
    "&a ",
    "*a",
    "&b [*a, *a, *a, *a]",
    "<<: *a",
    "!!str ",
    "!!binary ",
    "!tag ",
    "{",
    "}",
    "[",
    "]",
    ",",
    "\t",
    "\"",
    "'",
    "#",
    "|",
    ">",
    "|-",
    "---\n",
    "...\n",
    "? ",
    "~",
    "null",
    "true",
    "yes",
    "1e400",
    "-1",
    "-0",
    "0x1F",
    "0o17",
    ".inf",
    "-.inf",
    ".nan",
    "NaN",
    "18446744073709551616",
    "1000000000000",
    "999999",
    "0",
    "12",
    "0.5",
    "1.0",
    "\n",
    "\r\n",
    "\r",
    "  ",
    "\u{feff}",
    "\u{0}",
    "\u{85}",
    "\u{2028}",
    "é",
    "knotwise: 1",
    "knotwise: 2",
    "title: ",
    "data:\n  file: data.csv\n",
    "response: y",
    "linear:\n  - column: x\n",
    "smooth:\n  - column: x\n    degree: 0\n",
    "basis-sizes: [1, 2, 3]",
    "basis-sizes: []",
    "  notes: n.md\n",
    "  notes: .\n",
    "  notes: ../\n",
    "  sha256: 00\n",
    "  missing: [NA, \"\"]\n",
    "reference: a",
    "categorical: true",
    "seed: -5",
    "seed: 99999999999999999999",
    "cutoff: 1e-300",
    "efficiency: 0.5000001",
    "subsamples: 0",
    "start: least-squares",
    "loss: huber",
    "robust-scale: per-size",
    "date: 2024-02-30",
    "date: 2024-02-29",
];

const CSV_CELLS: &[&str] = &[
    "",
    "NA",
    "NaN",
    "nan",
    "inf",
    "-inf",
    "Infinity",
    "1e400",
    "-1e400",
    "1e-400",
    "\"",
    "\"\"",
    "\"a,b\"",
    "\"a\nb\"",
    "\"1\"\"2\"",
    "\n",
    "\r\n",
    "\r",
    "\u{feff}",
    "\u{0}",
    "\u{85}",
    "-0",
    "+1",
    "1,5",
    "\"1,5\"",
    "0x10",
    " 1 ",
    "\t2\t",
    "1_000",
    "1e5",
    ".5",
    "5.",
    "-.5e-3",
    "1.7976931348623157e308",
    "4.9e-324",
    "é",
    "<b>x</b>",
    "y",
    "x",
    "g",
    "id",
    ",",
    ",,",
    "a",
    "b",
    "18446744073709551616",
    "9007199254740993",
];

/// Replace `out` by a mutant of itself.
fn mutate(rng: &mut Rng, out: &mut Vec<u8>, tokens: &[&str]) {
    let rounds = 1 + rng.below(6);
    for _ in 0..rounds {
        let len = out.len();
        let at = rng.below(len + 1);
        match rng.below(11) {
            0 if len > 0 => {
                let i = rng.below(len);
                out[i] ^= 1 << rng.below(8);
            }
            1 => out.insert(at, (rng.next() & 0xff) as u8),
            2 if len > 0 => {
                let n = 1 + rng.below(8.min(len));
                let start = rng.below(len - n + 1);
                out.drain(start..start + n);
            }
            3 | 4 => {
                let t = rng.pick(tokens).as_bytes();
                out.splice(at..at, t.iter().copied());
            }
            5..=8 => {
                let mut lines: Vec<Vec<u8>> = out.split(|b| *b == b'\n').map(<[u8]>::to_vec).collect();
                let n = lines.len();
                let i = rng.below(n);
                match rng.below(5) {
                    0 if n > 1 => {
                        lines.remove(i);
                    }
                    1 => {
                        let copy = lines[i].clone();
                        let times = 1 + rng.below(3);
                        for _ in 0..times {
                            lines.insert(i, copy.clone());
                        }
                    }
                    2 => {
                        let j = rng.below(n);
                        lines.swap(i, j);
                    }
                    3 => {
                        // Replace one comma-separated field of a line (a CSV cell or a YAML value).
                        let line = String::from_utf8_lossy(&lines[i]).into_owned();
                        let mut fields: Vec<String> = line.split(',').map(str::to_string).collect();
                        let f = rng.below(fields.len());
                        fields[f] = rng.pick(tokens).to_string();
                        lines[i] = fields.join(",").into_bytes();
                    }
                    _ => {
                        // Indent or dedent a line.
                        if rng.below(2) == 0 {
                            lines[i].splice(0..0, b"  ".iter().copied());
                        } else {
                            let k = lines[i].iter().take_while(|b| **b == b' ').count().min(2);
                            lines[i].drain(..k);
                        }
                    }
                }
                *out = lines.join(&b'\n');
            }
            9 if len > 1 => {
                // Duplicate a chunk.
                let start = rng.below(len);
                let end = (start + 1 + rng.below(64)).min(len);
                let chunk = out[start..end].to_vec();
                out.splice(end..end, chunk);
            }
            _ => {
                // Truncate.
                out.truncate(at);
            }
        }
        // Bound growth: a spec is refused above 1 MiB anyway and big inputs only slow the run.
        out.truncate(64 * 1024);
    }
}

/// A fresh folder for one target, with a small data file and notes file for specs that name them.
fn workdir(name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("knotwise-fuzz-{name}-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    std::fs::write(d.join("notes.md"), "Some *notes*.\n").unwrap();
    d
}

fn record_failure(target: &str, case: usize, input: &[u8], what: &str) -> String {
    let dir = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("target/fuzz-failures");
    let _ = std::fs::create_dir_all(&dir);
    let path = dir.join(format!("{target}-{}-{case}.bin", base_seed()));
    let _ = std::fs::write(&path, input);
    format!("{target} case {case} (seed {}): {what}; input saved to {}", base_seed(), path.display())
}

/// An error must say something, on a location that fits on one line.
fn check_error(e: &knotwise::error::Error) -> Result<(), String> {
    if e.what().trim().is_empty() {
        return Err(format!("empty error message: {e:?}"));
    }
    if e.location().is_some_and(|l| l.contains('\n')) {
        return Err(format!("location spans lines: {:?}", e.location()));
    }
    if e.suggestion().is_some_and(|h| h.trim().is_empty()) {
        return Err("empty hint".into());
    }
    if e.exit_code() != knotwise::error::EXIT_INPUT {
        return Err(format!("exit code {} for an input error", e.exit_code()));
    }
    Ok(())
}

fn spec_property(text: &str, base: &Path) -> Result<(), String> {
    match spec::parse(text, "fuzz.yaml", base) {
        Err(e) => check_error(&e),
        Ok(study) => {
            let resolved = study.to_resolved_yaml();
            match spec::parse(&resolved, "resolved.yaml", base) {
                Ok(again) if again == study => Ok(()),
                Ok(again) => Err(format!("resolved spec reads back differently:\n{resolved}\n{study:?}\n{again:?}")),
                Err(e) => Err(format!("resolved spec does not parse: {e}\n{resolved}")),
            }
        }
    }
}

const SPEC_SEEDS: &[&str] = &[
    "knotwise: 1\ntitle: Sales\ndata:\n  file: data.csv\n  missing: [\"\", NA]\n  id: id\nresponse: y\nlinear:\n  \
     - column: g\n    categorical: true\n    reference: a\nsmooth:\n  - column: x\n    degree: 3\n    knots: uniform\n    \
     basis-sizes: [4, 5]\nselection:\n  basis-sizes: [4, 5, 6]\n  bic-penalty: 0.5\n  robust-scale: per-size\nrobust:\n  \
     loss: huber\n  efficiency: 0.9\n  start: least-squares\n  subsamples: 50\noutliers:\n  cutoff: 3\nsensitivity:\n  \
     refit-without-flagged: false\n  influence: false\nreport:\n  notes: notes.md\n",
    "knotwise: 1\ntitle: \"Flow {style}\"\ndata: {file: data.csv, missing: [NA]}\nresponse: y\nlinear: [{column: x}]\n\
     smooth: []\n",
    "knotwise: 1\ntitle: Anchors\ndate: 2024-02-29\nseed: 7\ndata:\n  file: &f data.csv\nresponse: y\nsmooth:\n- \
     column: x\n- column: z\n  degree: 1\nreport:\n  notes: |\n    # Heading\n    text: with colon\n",
];

#[test]
fn fuzz_spec_parse_never_panics() {
    let seeds = corpus("spec", "yaml", SPEC_SEEDS);
    let dir = workdir("spec");
    let path = dir.join("fuzz.yaml");
    let mut rng = Rng(base_seed());
    let mut errors = 0usize;
    for case in 0..cases() {
        let mut bytes = rng.pick(&seeds).clone();
        mutate(&mut rng, &mut bytes, YAML_TOKENS);
        // Half the cases go through the file loader (raw bytes, maybe not UTF-8), half through `parse`.
        let via_file = case % 2 == 0;
        let outcome = catch_unwind(AssertUnwindSafe(|| {
            if via_file {
                std::fs::write(&path, &bytes).unwrap();
                match spec::load(&path) {
                    Err(e) => check_error(&e).map(|_| false),
                    Ok(_) => spec_property(&String::from_utf8_lossy(&bytes), &dir).map(|_| true),
                }
            } else {
                let text = String::from_utf8_lossy(&bytes);
                spec_property(&text, &dir).map(|_| spec::parse(&text, "fuzz.yaml", &dir).is_ok())
            }
        }));
        match outcome {
            Ok(Ok(ok)) => errors += usize::from(!ok),
            Ok(Err(what)) => panic!("{}", record_failure("spec", case, &bytes, &what)),
            Err(_) => panic!("{}", record_failure("spec", case, &bytes, "panicked")),
        }
    }
    eprintln!("fuzz spec: {} cases, {errors} refused with a message, seed {}", cases(), base_seed());
    let _ = std::fs::remove_dir_all(&dir);
}

const CSV_SEEDS: &[&str] = &[
    "id,y,x,g\nP1,1.5,2,a\nP2,2.5,3,b\nP3,NA,4,a\nP4,4,,b\n",
    "\u{feff}y,x,g\r\n1,2,a\r\n3,4,b\r\n5,6,\"a, b\"\r\n",
    "y,x,g,id\n\"1\",\"2\",\"two\nlines\",\"q\"\"uote\"\n-1e-3,+4.5e2,b,\n7,8,a,x\n",
];

/// Requests to read each CSV mutant with (different missing tokens, id column or not, categories).
fn requests(path: &Path) -> Vec<FrameRequest> {
    let base = FrameRequest {
        path: path.to_path_buf(),
        display: "data.csv".into(),
        missing: vec![String::new(), "NA".into()],
        id: Some("id".into()),
        numeric: vec!["y".into(), "x".into()],
        categorical: vec![("g".into(), None)],
    };
    vec![
        base.clone(),
        FrameRequest {
            id: None,
            missing: vec!["NA".into()],
            categorical: vec![("g".into(), Some("a".into()))],
            ..base.clone()
        },
        FrameRequest { id: None, numeric: vec!["y".into()], categorical: vec![], missing: vec![], ..base },
    ]
}

fn frame_property(f: &data::Frame) -> Result<(), String> {
    let n = f.n_used();
    if (!f.ids.is_empty() && f.ids.len() != n) || f.n_read != n + f.dropped.len() || n == 0 {
        return Err(format!("inconsistent counts: {f:?}"));
    }
    if f.lines.windows(2).any(|w| w[0] >= w[1]) || f.lines.first().is_some_and(|l| *l < 2) {
        return Err(format!("line numbers not increasing from 2: {:?}", f.lines));
    }
    for c in &f.columns {
        match &c.data {
            ColumnData::Numeric(v) => {
                if v.len() != n || v.iter().any(|x| !x.is_finite()) {
                    return Err(format!("numeric column {} is bad: {v:?}", c.name));
                }
            }
            ColumnData::Categorical { levels, codes, reference, counts } => {
                let sorted = levels.windows(2).all(|w| w[0].as_bytes() < w[1].as_bytes());
                let coded = codes.len() == n && codes.iter().all(|&c| (c as usize) < levels.len());
                let counted = counts.iter().sum::<usize>() == n && counts.iter().all(|&k| k > 0);
                if levels.len() < 2 || !sorted || !coded || !counted || *reference >= levels.len() {
                    return Err(format!("categorical column {} is bad: {:?}", c.name, c.data));
                }
            }
        }
    }
    Ok(())
}

#[test]
fn fuzz_csv_load_never_panics() {
    let seeds = corpus("csv", "csv", CSV_SEEDS);
    let dir = workdir("csv");
    let path = dir.join("data.csv");
    let reqs = requests(&path);
    let mut rng = Rng(base_seed() ^ 0xC5F);
    let (mut loaded, mut refused, mut drafted) = (0usize, 0usize, 0usize);
    for case in 0..cases() {
        let mut bytes = rng.pick(&seeds).clone();
        mutate(&mut rng, &mut bytes, CSV_CELLS);
        let req = &reqs[case % reqs.len()];
        let outcome = catch_unwind(AssertUnwindSafe(|| -> Result<(bool, bool), String> {
            std::fs::write(&path, &bytes).unwrap();
            let ok = match data::load(req) {
                Ok(f) => frame_property(&f).map(|_| true)?,
                Err(e) => check_error(&e).map(|_| false)?,
            };
            // `init` reads every column; when it drafts a spec, the draft must parse.
            let drafted = match knotwise::init::draft_spec(&path, None) {
                Err(e) => check_error(&e).map(|_| false)?,
                Ok(text) => match spec::parse(&text, "draft.yaml", &dir) {
                    Ok(_) => true,
                    Err(e) => return Err(format!("init draft does not parse: {e}\n{text}")),
                },
            };
            Ok((ok, drafted))
        }));
        match outcome {
            Ok(Ok((ok, d))) => {
                loaded += usize::from(ok);
                refused += usize::from(!ok);
                drafted += usize::from(d);
            }
            Ok(Err(what)) => panic!("{}", record_failure("csv", case, &bytes, &what)),
            Err(_) => panic!("{}", record_failure("csv", case, &bytes, "panicked")),
        }
    }
    eprintln!(
        "fuzz csv: {} cases, {loaded} loaded, {refused} refused with a message, {drafted} init drafts parsed, seed {}",
        cases(),
        base_seed()
    );
    let _ = std::fs::remove_dir_all(&dir);
}

//! End-to-end tests of the binary: outputs, byte-identical reruns, verify, compare, init → check.

mod common;
use common::root;

use std::path::{Path, PathBuf};
use std::process::Command;

/// A fresh scratch folder for one test.
fn scratch(name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("knotwise-test-{name}-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    d
}

/// Copy the cold-store demo (spec, data) into `dir`, returning the spec path.
fn copy_demo(dir: &Path) -> PathBuf {
    std::fs::create_dir_all(dir.join("specs")).unwrap();
    std::fs::create_dir_all(dir.join("demo-data")).unwrap();
    std::fs::copy(root("demo-data/cold-store-energy.csv"), dir.join("demo-data/cold-store-energy.csv")).unwrap();
    let spec = dir.join("specs/cold-store.yaml");
    std::fs::copy(root("specs-demo/cold-store.yaml"), &spec).unwrap();
    spec
}

fn knotwise(args: &[&str], cwd: &Path) -> (i32, String, String) {
    let out = Command::new(env!("CARGO_BIN_EXE_knotwise")).args(args).current_dir(cwd).output().unwrap();
    (
        out.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

const FILES: [&str; 6] =
    ["report.html", "results.json", "rows.csv", "study.resolved.yaml", "rerun.json", "manifest.sha256"];

fn read(p: &Path) -> Vec<u8> {
    std::fs::read(p).unwrap_or_else(|e| panic!("{}: {e}", p.display()))
}

fn digest(dir: &Path) -> String {
    let v: serde_json::Value = serde_json::from_slice(&read(&dir.join("results.json"))).unwrap();
    v["provenance"]["digest"].as_str().unwrap().to_string()
}

#[test]
fn two_runs_give_identical_bytes_and_other_folders_the_same_digest() {
    let d = scratch("identical");
    let spec = copy_demo(&d);
    let s = spec.to_str().unwrap();
    let (code, out, err) = knotwise(&["run", s, "--out", "a"], &d);
    assert_eq!(code, 0, "{out}{err}");
    let (code, _, _) = knotwise(&["run", s, "--out", "b"], &d);
    assert_eq!(code, 0);
    // Another working folder and a nested output folder.
    let (code, _, _) = knotwise(&["run", "cold-store.yaml", "--out", "../nested/deeper/c"], &d.join("specs"));
    assert_eq!(code, 0);
    for f in FILES {
        if f == "rerun.json" || f == "manifest.sha256" {
            continue; // rerun.json records the path back to the spec, which differs by folder
        }
        assert_eq!(read(&d.join("a").join(f)), read(&d.join("b").join(f)), "{f} differs between two runs");
        assert_eq!(
            read(&d.join("a").join(f)),
            read(&d.join("nested/deeper/c").join(f)),
            "{f} differs with another output folder"
        );
    }
    assert_eq!(digest(&d.join("a")), digest(&d.join("nested/deeper/c")));
    // Rerunning into the same folder replaces it with identical bytes.
    let before = read(&d.join("a/report.html"));
    let (code, _, _) = knotwise(&["run", s, "--out", "a"], &d);
    assert_eq!(code, 0);
    assert_eq!(before, read(&d.join("a/report.html")));
    let _ = std::fs::remove_dir_all(&d);
}

#[test]
fn verify_passes_then_names_data_spec_and_edited_files() {
    let d = scratch("verify");
    let spec = copy_demo(&d);
    let s = spec.to_str().unwrap();
    assert_eq!(knotwise(&["run", s, "--out", "out"], &d).0, 0);
    let (code, out, err) = knotwise(&["verify", "out"], &d);
    assert_eq!(code, 0, "{out}{err}");
    assert!(out.starts_with("verified"), "{out}");
    assert!(out.contains(&digest(&d.join("out"))));

    // sha256sum -c reads the manifest (when the tool exists on this machine).
    if Command::new("sha256sum").arg("--version").output().is_ok() {
        let ok = Command::new("sha256sum").args(["-c", "manifest.sha256"]).current_dir(d.join("out")).output().unwrap();
        assert!(ok.status.success(), "sha256sum -c failed on fresh outputs");
    }

    // An edited report is named.
    let report = d.join("out/report.html");
    let mut html = read(&report);
    html.extend_from_slice(b"<!-- edited -->");
    std::fs::write(&report, &html).unwrap();
    let (code, out, _) = knotwise(&["verify", "out"], &d);
    assert_eq!(code, 1);
    assert!(out.contains("report.html was edited"), "{out}");
    if Command::new("sha256sum").arg("--version").output().is_ok() {
        let bad =
            Command::new("sha256sum").args(["-c", "manifest.sha256"]).current_dir(d.join("out")).output().unwrap();
        assert!(!bad.status.success(), "sha256sum -c passed on an edited report");
    }

    // One data byte changed: verify names the data.
    assert_eq!(knotwise(&["run", s, "--out", "out"], &d).0, 0);
    let data = d.join("demo-data/cold-store-energy.csv");
    let text = String::from_utf8(read(&data)).unwrap();
    let changed = text.replacen("4706.8", "4706.9", 1);
    assert_ne!(text, changed);
    std::fs::write(&data, changed).unwrap();
    let (code, out, _) = knotwise(&["verify", "out"], &d);
    assert_eq!(code, 1, "{out}");
    assert!(out.contains("data changed"), "{out}");
    std::fs::write(&data, text).unwrap();

    // The recorded spec's cutoff changed: verify names the spec and the rows whose flag moved.
    let resolved = d.join("out/study.resolved.yaml");
    let yaml = String::from_utf8(read(&resolved)).unwrap();
    let edited = yaml.replace("cutoff: 2.5", "cutoff: 4.5");
    assert_ne!(yaml, edited);
    std::fs::write(&resolved, edited).unwrap();
    let (code, out, _) = knotwise(&["verify", "out"], &d);
    assert_eq!(code, 1);
    assert!(out.contains("study.resolved.yaml"), "{out}");
    assert!(out.contains("flagged rows"), "{out}");

    // Missing data: exit 2 with the recorded path and digest.
    std::fs::remove_file(&data).unwrap();
    let (code, _, err) = knotwise(&["verify", "out"], &d);
    assert_eq!(code, 2);
    assert!(err.contains("the recorded data file is missing"), "{err}");
    assert!(err.contains("../demo-data/cold-store-energy.csv"), "{err}");
    let _ = std::fs::remove_dir_all(&d);
}

#[test]
fn compare_self_other_seed_and_other_cutoff() {
    let d = scratch("compare");
    let spec = copy_demo(&d);
    let s = spec.to_str().unwrap();
    assert_eq!(knotwise(&["run", s, "--out", "a"], &d).0, 0);
    let (code, out, _) = knotwise(&["compare", "a", "a"], &d);
    assert_eq!(code, 0);
    assert!(out.contains("no differences"), "{out}");

    let text = String::from_utf8(read(&spec)).unwrap();
    let seed_spec = d.join("specs/other-seed.yaml");
    std::fs::write(&seed_spec, text.replace("seed: 73", "seed: 99")).unwrap();
    assert_eq!(knotwise(&["run", seed_spec.to_str().unwrap(), "--out", "b"], &d).0, 0);
    let (code, out, _) = knotwise(&["compare", "a", "b"], &d);
    assert_eq!(code, 0, "another seed should stay within tolerance:\n{out}");

    let cut_spec = d.join("specs/other-cutoff.yaml");
    std::fs::write(&cut_spec, text.replace("cutoff: 2.5", "cutoff: 4")).unwrap();
    assert_eq!(knotwise(&["run", cut_spec.to_str().unwrap(), "--out", "c"], &d).0, 0);
    let (code, out, _) = knotwise(&["compare", "a", "c/results.json"], &d);
    assert_eq!(code, 1, "{out}");
    assert!(out.contains("flagged rows (only in A | only in B)"), "{out}");
    let _ = std::fs::remove_dir_all(&d);
}

#[test]
fn init_drafts_a_spec_that_check_accepts() {
    for (csv, name) in [("demo-data/assessment-sales.csv", "assessment"), ("demo-data/cold-store-energy.csv", "cold")] {
        let d = scratch(&format!("init-{name}"));
        std::fs::copy(root(csv), d.join("data.csv")).unwrap();
        let (code, out, err) = knotwise(&["init", "data.csv"], &d);
        assert_eq!(code, 0, "{err}");
        std::fs::write(d.join("draft.yaml"), &out).unwrap();
        let (code, checked, err) = knotwise(&["check", "draft.yaml"], &d);
        assert_eq!(code, 0, "check rejected the drafted spec:\n{out}\n{err}");
        assert!(checked.contains("resolved spec"));
        let _ = std::fs::remove_dir_all(&d);
    }
}

#[test]
fn a_failed_run_writes_nothing() {
    let d = scratch("nothing");
    let spec = copy_demo(&d);
    let text = String::from_utf8(read(&spec)).unwrap();
    std::fs::write(&spec, text.replace("response: energy_kwh", "response: energy_kw")).unwrap();
    let (code, _, err) = knotwise(&["run", spec.to_str().unwrap(), "--out", "out"], &d);
    assert_eq!(code, 2, "{err}");
    assert!(!d.join("out").exists(), "a failed run left an output folder");
    let leftovers: Vec<_> = std::fs::read_dir(&d)
        .unwrap()
        .filter_map(|e| e.ok())
        .filter(|e| e.file_name().to_string_lossy().contains(".tmp-"))
        .collect();
    assert!(leftovers.is_empty(), "temporary folder left behind");
    let _ = std::fs::remove_dir_all(&d);
}

/// 20,000 invented rows: more than the linear algebra's 4,096-row blocks (so the threads share the
/// work) and more than the S-estimate's 5,000-row search subset.
fn write_large_study(dir: &Path) -> PathBuf {
    let mut g = common::Lcg(99);
    let mut csv = String::from("y,z,x\n");
    for _ in 0..20_000 {
        let (z, x) = (g.normal(), g.uniform() * 5.0);
        let mut y = 1.0 + 0.5 * z + (1.3 * x).sin() + 0.3 * g.normal();
        if g.uniform() < 0.05 {
            y += 4.0;
        }
        csv.push_str(&format!("{y},{z},{x}\n"));
    }
    std::fs::write(dir.join("large.csv"), csv).unwrap();
    let spec = dir.join("large.yaml");
    std::fs::write(
        &spec,
        "knotwise: 1\ntitle: Threads\ndata:\n  file: large.csv\nresponse: y\nlinear:\n  - column: z\nsmooth:\n  - column: x\nselection:\n  basis-sizes: [5, 7]\nrobust:\n  subsamples: 100\n",
    )
    .unwrap();
    spec
}

#[test]
fn threads_simd_and_design_keeping_do_not_change_a_byte() {
    let d = scratch("threads");
    let spec = write_large_study(&d);
    let s = spec.to_str().unwrap();
    // t3 also runs the kernels without their AVX2 copies (KNOTWISE_SIMD=0; a no-op on other CPUs) and
    // builds the chosen designs again after the grid instead of keeping them (as large data does).
    for (threads, simd, keep, out) in [("1", "1", "2000000", "t1"), ("2", "1", "2000000", "t2"), ("3", "0", "0", "t3")]
    {
        let o = Command::new(env!("CARGO_BIN_EXE_knotwise"))
            .args(["run", s, "--out", out])
            .env("KNOTWISE_THREADS", threads)
            .env("KNOTWISE_SIMD", simd)
            .env("KNOTWISE_KEEP_DESIGN_ROWS", keep)
            .current_dir(&d)
            .output()
            .unwrap();
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    }
    for f in ["report.html", "results.json", "rows.csv"] {
        assert_eq!(read(&d.join("t1").join(f)), read(&d.join("t2").join(f)), "{f}: 1 vs 2 threads");
        assert_eq!(
            read(&d.join("t1").join(f)),
            read(&d.join("t3").join(f)),
            "{f}: 1 vs 3 threads without SIMD, designs rebuilt"
        );
    }
    let _ = std::fs::remove_dir_all(&d);
}

#[test]
fn a_pinned_study_verifies_and_a_moved_data_file_verifies_with_data() {
    let d = scratch("pinned");
    let spec = copy_demo(&d);
    let data = d.join("demo-data/cold-store-energy.csv");
    let pin = knotwise::provenance::sha256_hex(&read(&data));
    let text = String::from_utf8(read(&spec)).unwrap();
    let pinned = text.replace("  id: day\n", &format!("  id: day\n  sha256: {pin}\n"));
    assert_ne!(text, pinned);
    std::fs::write(&spec, pinned).unwrap();
    assert_eq!(knotwise(&["run", spec.to_str().unwrap(), "--out", "out"], &d).0, 0);
    let (code, out, err) = knotwise(&["verify", "out"], &d);
    assert_eq!(code, 0, "{out}{err}");
    // The same bytes somewhere else, named with --data, still verify.
    std::fs::rename(&data, d.join("moved.csv")).unwrap();
    let (code, out, err) = knotwise(&["verify", "out", "--data", "moved.csv"], &d);
    assert_eq!(code, 0, "{out}{err}");
    let _ = std::fs::remove_dir_all(&d);
}

//! Where a run writes, tried as a careless or hostile user would: labels and pipeline names
//! that climb out of the output root, point elsewhere or name nothing are refused before
//! anything touches the disk, with sentinel files outside (and inside) the output root left
//! exactly as they were; a rerun replaces the run folder whole and leaves no work folder; a
//! second run into a folder another live process holds is refused, naming the holder.

use crate::support::repo;
use assert_cmd::Command;
use std::path::{Path, PathBuf};

/// A copy of the sample fixture in `dir`, its pipeline file edited by `edit`.
fn sample(dir: &Path, edit: impl Fn(String) -> String) -> PathBuf {
    let src = repo().join("tests/fixtures");
    std::fs::create_dir_all(dir.join("sample")).unwrap();
    for e in std::fs::read_dir(src.join("sample")).unwrap() {
        let e = e.unwrap();
        std::fs::copy(e.path(), dir.join("sample").join(e.file_name())).unwrap();
    }
    let p = dir.join("sample.toml");
    std::fs::write(&p, edit(std::fs::read_to_string(src.join("sample.toml")).unwrap())).unwrap();
    p
}

/// Every file below `dir` with its content, for before/after comparisons.
fn snapshot(dir: &Path) -> std::collections::BTreeMap<String, Vec<u8>> {
    crate::support::files(dir, &[])
}

fn run(pipeline: &Path, args: &[&str]) -> assert_cmd::assert::Assert {
    Command::cargo_bin("hazardline").unwrap().arg("run").arg(pipeline).args(args).assert()
}

fn stderr(a: &assert_cmd::assert::Assert) -> String {
    String::from_utf8(a.get_output().stderr.clone()).unwrap()
}

#[test]
fn labels_that_climb_or_point_elsewhere_touch_nothing() {
    let dir = tempfile::tempdir().unwrap();
    let pipeline = sample(dir.path(), |t| t);
    let root = dir.path().join("out");
    // An earlier run and a file of the user's in the output root, a folder of the user's
    // elsewhere: the sentinels.
    std::fs::create_dir_all(root.join("sample/earlier")).unwrap();
    std::fs::write(root.join("sample/earlier/report.md"), "earlier run").unwrap();
    std::fs::write(root.join("notes.txt"), "the user's file").unwrap();
    let elsewhere = dir.path().join("elsewhere");
    std::fs::create_dir_all(&elsewhere).unwrap();
    std::fs::write(elsewhere.join("thesis.txt"), "not ours").unwrap();
    let before = snapshot(dir.path());
    let absolute = elsewhere.display().to_string();
    for label in ["..", ".", "", "../../x", "../sample", absolute.as_str(), "a/b", ".hidden", "x\ny"] {
        let a = run(&pipeline, &["--out", root.to_str().unwrap(), "--label", label]).code(2);
        let e = stderr(&a);
        assert!(e.contains("--label") && e.contains("cannot name a folder of the output root"), "{label:?}: {e}");
        assert_eq!(snapshot(dir.path()), before, "--label {label:?} changed files");
    }
    // A run as a shard is held to the same rule.
    let a = run(&pipeline, &["--out", root.to_str().unwrap(), "--label", "..", "--shard", "1/2"]).code(2);
    assert!(stderr(&a).contains("--label"), "{}", stderr(&a));
    assert_eq!(snapshot(dir.path()), before);
}

#[test]
fn pipeline_names_that_climb_or_are_absolute_are_refused() {
    let dir = tempfile::tempdir().unwrap();
    let root = dir.path().join("out");
    std::fs::create_dir_all(&root).unwrap();
    for name in ["../../x", "/tmp/hazardline-absolute-name", "..", ""] {
        let pipeline = sample(dir.path(), |t| t.replace("name = \"sample\"", &format!("name = {name:?}")));
        let before = snapshot(dir.path());
        let a = run(&pipeline, &["--out", root.to_str().unwrap()]).code(2);
        let e = stderr(&a);
        assert!(e.contains("key `name`") && e.contains("cannot name a folder"), "{name:?}: {e}");
        assert_eq!(snapshot(dir.path()), before, "name {name:?} changed files");
    }
    assert!(!Path::new("/tmp/hazardline-absolute-name").exists());
    // A report.label is checked the same way.
    let pipeline = sample(dir.path(), |t| t.replace("label = \"fixture\"", "label = \"../up\""));
    let e = stderr(&run(&pipeline, &["--out", root.to_str().unwrap()]).code(2));
    assert!(e.contains("key `report.label`"), "{e}");
}

#[test]
fn a_rerun_replaces_the_folder_whole_and_a_held_folder_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let pipeline = sample(dir.path(), |t| t);
    let root = dir.path().join("out");
    let out = root.to_str().unwrap();
    run(&pipeline, &["--out", out]).success();
    let run_dir = root.join("sample/fixture");
    std::fs::write(run_dir.join("stray.txt"), "left in the old folder").unwrap();
    run(&pipeline, &["--out", out]).success();
    assert!(run_dir.join("report.md").exists() && !run_dir.join("stray.txt").exists(), "the folder is replaced whole");
    let left: Vec<String> = std::fs::read_dir(root.join("sample"))
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().to_string())
        .collect();
    assert_eq!(left, ["fixture"], "no lock, work or aside folder is left");

    // A live process (this test) holds the folder: the run is refused and names it.
    let host = std::fs::read_to_string("/proc/sys/kernel/hostname")
        .map(|h| h.trim().to_string())
        .unwrap_or_else(|_| "unknown".into());
    let lock = root.join("sample/.fixture.lock");
    std::fs::write(&lock, format!("pid {}\nhost {host}\n", std::process::id())).unwrap();
    let before = snapshot(&root);
    let e = stderr(&run(&pipeline, &["--out", out]).code(2));
    assert!(e.contains(".fixture.lock") && e.contains(&format!("process {}", std::process::id())), "{e}");
    assert_eq!(snapshot(&root), before, "the refused run wrote nothing");
    std::fs::remove_file(&lock).unwrap();
}

#[test]
fn a_closed_standard_output_ends_the_command_quietly() {
    let dir = tempfile::tempdir().unwrap();
    let pipeline = sample(dir.path(), |t| t);
    let root = dir.path().join("out");
    let mut child = std::process::Command::new(assert_cmd::cargo::cargo_bin("hazardline"))
        .arg("run")
        .arg(&pipeline)
        .args(["--out", root.to_str().unwrap()])
        .stdout(std::process::Stdio::piped())
        .stderr(std::process::Stdio::piped())
        .spawn()
        .unwrap();
    // The reader goes away before the command prints its summary, as `| true` would.
    drop(child.stdout.take());
    let out = child.wait_with_output().unwrap();
    let e = String::from_utf8_lossy(&out.stderr);
    assert!(out.status.success() && !e.contains("panicked") && !e.contains("Broken pipe"), "{:?}: {e}", out.status);
    assert!(root.join("sample/fixture/report.md").exists(), "the files were written");
}

#[test]
fn settings_and_sizes_that_would_overflow_are_refused_before_work_starts() {
    let dir = tempfile::tempdir().unwrap();
    let pipeline = sample(dir.path(), |t| t + "\n[backtest]\nenabled = true\nlookback_days = 100000000\n");
    let e = stderr(&run(&pipeline, &["--out", dir.path().join("out").to_str().unwrap()]).code(2));
    assert!(e.contains("key `backtest.lookback_days`") && e.contains("100000000"), "{e}");
    let a = Command::cargo_bin("hazardline")
        .unwrap()
        .args(["demo", dir.path().join("d").to_str().unwrap(), "--entities", "1000000000"])
        .assert()
        .code(2);
    assert!(stderr(&a).contains("--entities must be from 1 to"), "{}", stderr(&a));
    assert!(!dir.path().join("d").exists());
}

#[test]
fn an_entity_named_in_a_setting_must_exist() {
    let dir = tempfile::tempdir().unwrap();
    for (from, to, key) in [
        (
            "charted_entities = [\"Corvane Logistics\"",
            "charted_entities = [\"Corvane Logistic\"",
            "report.charted_entities",
        ),
        ("cir = true", "cir = true\ncir_entities = [\"Halberd Mill\"]", "calibration.cir_entities"),
    ] {
        let pipeline = sample(dir.path(), |t| {
            assert!(t.contains(from), "{from}");
            t.replacen(from, to, 1)
        });
        let e = stderr(&run(&pipeline, &["--out", dir.path().join("out").to_str().unwrap()]).code(2));
        assert!(e.contains(&format!("key `{key}`")) && e.contains("is not an entity of the CDS quotes"), "{e}");
    }
}

#[test]
fn pipeline_files_that_cannot_be_read_say_why() {
    let dir = tempfile::tempdir().unwrap();
    let pipeline = sample(dir.path(), |t| t);
    let load = |p: &Path| stderr(&run(p, &["--out", dir.path().join("out").to_str().unwrap()]).code(2));
    // Latin-1 text: the line of the first byte that is not UTF-8.
    let mut latin1 = std::fs::read(&pipeline).unwrap();
    latin1.extend_from_slice(b"\n# caf\xe9\n");
    let lines = latin1.iter().filter(|b| **b == b'\n').count();
    std::fs::write(&pipeline, &latin1).unwrap();
    let e = load(&pipeline);
    assert!(e.contains(&format!("line {lines}")) && e.contains("not UTF-8"), "{e}");
    // A link to itself is not reported as missing.
    let looped = dir.path().join("loop.toml");
    std::os::unix::fs::symlink(&looped, &looped).unwrap();
    let e = load(&looped);
    assert!(!e.contains("not found") && e.contains("loop.toml"), "{e}");
}

#[test]
fn names_from_the_data_are_escaped_in_the_report() {
    let dir = tempfile::tempdir().unwrap();
    let odd = "Corvane|Logistics <b>[x](y)";
    let pipeline = sample(dir.path(), |t| t.replace("Corvane Logistics", odd));
    for e in std::fs::read_dir(dir.path().join("sample")).unwrap() {
        let p = e.unwrap().path();
        let text = std::fs::read_to_string(&p).unwrap();
        std::fs::write(&p, text.replace("Corvane Logistics", odd)).unwrap();
    }
    let root = dir.path().join("out");
    run(&pipeline, &["--out", root.to_str().unwrap()]).success();
    let report = std::fs::read_to_string(root.join("sample/fixture/report.md")).unwrap();
    assert!(report.contains("Corvane\\|Logistics &lt;b&gt;\\[x\\](y)"), "the name is shown, escaped");
    assert!(!report.contains("<b>") && !report.contains("Corvane|Logistics"), "no raw tag or cell break");
}

/// Series and method names in the stability settings are checked before any data is read
/// (before: a typo in `cusum_series` switched the test off without a word).
#[test]
fn a_series_or_method_named_in_a_setting_must_exist() {
    let dir = tempfile::tempdir().unwrap();
    for (section, key) in [
        ("cusum_series = [\"cir_kappa\", \"cir_kapa\"]", "stability.cusum_series"),
        ("move_thresholds = { hazard_node_5X = 0.2 }", "stability.move_thresholds"),
        ("residual_flag_bp = { cri = 5.0 }", "stability.residual_flag_bp"),
    ] {
        let pipeline = sample(dir.path(), |t| format!("{t}\n[stability]\n{section}\n"));
        let e = stderr(&run(&pipeline, &["--out", dir.path().join("out").to_str().unwrap()]).code(2));
        assert!(e.contains(&format!("key `{key}`")) && e.contains("is not a"), "{e}");
        assert!(!dir.path().join("out").exists(), "refused before anything is written");
    }
    // The names that exist pass.
    let pipeline = sample(dir.path(), |t| {
        format!("{t}\n[stability]\ncusum_series = [\"cir_kappa\", \"hazard_node_5Y\", \"pd_1y\"]\nmove_thresholds = {{ hazard_5y = 0.2 }}\nresidual_flag_bp = {{ cir = 5.0 }}\n")
    });
    run(&pipeline, &["--out", dir.path().join("out").to_str().unwrap()]).success();
}

/// One stray row dated 9999-12-31 (a typo for 2019-12-31) has no discount curve: it is rejected
/// at calibration and names neither the run folder nor its period (before: `asof-9999-12-31`).
#[test]
fn a_stray_far_future_row_does_not_name_the_run() {
    let dir = tempfile::tempdir().unwrap();
    let pipeline = sample(dir.path(), |t| t.replace("label = \"fixture\"", ""));
    let quotes = dir.path().join("sample/cds_quotes.csv");
    let mut text = std::fs::read_to_string(&quotes).unwrap();
    text += "9999-12-31,Corvane Logistics,USD,5Y,80,,,\n";
    std::fs::write(&quotes, text).unwrap();
    let out = dir.path().join("out");
    run(&pipeline, &["--out", out.to_str().unwrap()]).success();
    let runs: Vec<String> = std::fs::read_dir(out.join("sample"))
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    assert_eq!(runs, ["asof-2024-04-12"]);
    let manifest = std::fs::read_to_string(out.join("sample/asof-2024-04-12/manifest.json")).unwrap();
    assert!(manifest.contains("\"2024-04-12\"") && !manifest.contains("9999"), "{manifest}");
}

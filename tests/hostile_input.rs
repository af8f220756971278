//! Hostile and broken plans through the binary: every one must end with exit status 2, a
//! message naming the file and what is wrong, no panic, and nothing written under `--out`.
//! A generous process timeout guards against hangs only; nothing here measures time.

use assert_cmd::Command;
use predicates::prelude::*;
use std::fs;
use std::path::Path;
use std::time::Duration;

/// Hang guard only (not a timing assertion): far above the sub-second budget.
const HANG_GUARD: Duration = Duration::from_secs(60);

const STAGE: &str = "  - {name: a, tail_current: 1 mA, load_resistance: 2k}\n";
/// A stage with a mismatch spread, so Monte Carlo has something to draw (a stage without one
/// is left out of the population and costs nothing).
const SPREAD_STAGE: &str =
    "  - {name: a, tail_current: 1 mA, load_resistance: 2k, mismatch_sigma: {saturation_current: 1%}}\n";

fn run_plan(dir: &Path, plan: &str) -> assert_cmd::assert::Assert {
    let path = dir.join("plan.yaml");
    fs::write(&path, plan).unwrap();
    Command::cargo_bin("linbudget")
        .unwrap()
        .arg("run")
        .arg(&path)
        .arg("--out")
        .arg(dir.join("out"))
        .timeout(HANG_GUARD)
        .assert()
}

fn refused(plan: &str, message: &str) {
    let dir = tempfile::tempdir().unwrap();
    run_plan(dir.path(), plan)
        .code(2)
        .stderr(predicate::str::contains("plan.yaml"))
        .stderr(predicate::str::contains(message))
        .stderr(predicate::str::contains("panicked").not());
    assert!(
        !dir.path().join("out").exists(),
        "something was written for: {message}"
    );
}

#[test]
fn an_alias_bomb_is_refused() {
    // The "billion laughs" pattern (common practice in parser hardening): nine levels of
    // nine-fold aliases expand to 9^9 ≈ 3.9e8 leaves.
    let mut plan = String::from("a0: &a0 [x, x, x, x, x, x, x, x, x]\n");
    for level in 1..=9 {
        let p = level - 1;
        plan.push_str(&format!(
            "a{level}: &a{level} [*a{p}, *a{p}, *a{p}, *a{p}, *a{p}, *a{p}, *a{p}, *a{p}, *a{p}]\n"
        ));
    }
    refused(&plan, "YAML");
}

#[test]
fn twenty_thousand_nested_lists_are_refused() {
    let plan = format!(
        "name: deep\nstages: {}{}\n",
        "[".repeat(20_000),
        "]".repeat(20_000)
    );
    refused(&plan, "YAML");
}

#[test]
fn twenty_thousand_nested_mappings_are_refused() {
    let plan = format!(
        "name: deep\nstages: {}1{}\n",
        "{a: ".repeat(20_000),
        "}".repeat(20_000)
    );
    refused(&plan, "YAML");
}

#[test]
fn a_name_that_climbs_out_of_the_output_folder_is_refused() {
    refused(
        &format!("name: ../x\nstages:\n{STAGE}drive: {{amplitudes: [1 mV]}}\n"),
        "cannot name an output folder",
    );
}

#[test]
fn a_nan_amplitude_is_refused() {
    refused(
        &format!("name: hostile\nstages:\n{STAGE}drive: {{amplitudes: [.nan]}}\n"),
        "drive.amplitudes[0]",
    );
}

#[test]
fn an_infinite_tail_current_is_refused() {
    refused(
        "name: hostile\nstages:\n  - {name: a, tail_current: .inf, load_resistance: 2k}\ndrive: {amplitudes: [1 mV]}\n",
        "stages[0].tail_current",
    );
}

#[test]
fn a_billion_amplitudes_are_refused_with_the_estimate() {
    refused(
        &format!(
            "name: hostile\nstages:\n{STAGE}drive:\n  amplitudes: {{from: 1 mV, to: 1 V, points: 1000000000}}\n"
        ),
        "sample solves",
    );
}

#[test]
fn a_trillion_monte_carlo_runs_are_refused_with_the_estimate_and_the_way_out() {
    let plan = format!(
        "name: hostile\nstages:\n{SPREAD_STAGE}drive: {{amplitudes: [1 mV]}}\nmonte_carlo: {{runs: 1000000000000, seed: 3}}\n"
    );
    refused(&plan, "--max-work");
    refused(&plan, "monte_carlo.runs");
}

#[test]
fn a_raised_work_limit_lets_a_large_plan_through_check() {
    // The limit is a deliberate setting: the same plan passes `check` once it is raised.
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("plan.yaml");
    fs::write(
        &path,
        format!("name: hostile\nstages:\n{SPREAD_STAGE}drive: {{amplitudes: [1 mV]}}\nmonte_carlo: {{runs: 1000000000, seed: 3}}\n"),
    )
    .unwrap();
    Command::cargo_bin("linbudget")
        .unwrap()
        .arg("check")
        .arg(&path)
        .timeout(HANG_GUARD)
        .assert()
        .code(2);
    Command::cargo_bin("linbudget")
        .unwrap()
        .args(["check", "--max-work", "1e18"])
        .arg(&path)
        .timeout(HANG_GUARD)
        .assert()
        .code(0);
}

const GOOD: &str = "name: good\nstages:\n  - {name: a, tail_current: 1 mA, load_resistance: 2k}\ndrive: {amplitudes: [10 mV]}\n";

#[test]
fn an_out_that_is_a_file_is_refused_and_left_alone() {
    let dir = tempfile::tempdir().unwrap();
    let plan = dir.path().join("plan.yaml");
    fs::write(&plan, GOOD).unwrap();
    let out = dir.path().join("not-a-folder");
    fs::write(&out, "keep me").unwrap();
    Command::cargo_bin("linbudget")
        .unwrap()
        .arg("run")
        .arg(&plan)
        .arg("--out")
        .arg(&out)
        .timeout(HANG_GUARD)
        .assert()
        .code(2)
        .stderr(predicate::str::contains("not a folder"));
    assert_eq!(fs::read_to_string(&out).unwrap(), "keep me");
    // Below a file, too.
    Command::cargo_bin("linbudget")
        .unwrap()
        .arg("run")
        .arg(&plan)
        .arg("--out")
        .arg(out.join("sub"))
        .timeout(HANG_GUARD)
        .assert()
        .code(2)
        .stderr(predicate::str::contains("not a folder"));
}

#[cfg(unix)]
#[test]
fn an_out_is_written_exactly_when_something_can_be_written_there() {
    use std::os::unix::fs::PermissionsExt;
    let dir = tempfile::tempdir().unwrap();
    let plan = dir.path().join("plan.yaml");
    fs::write(&plan, GOOD).unwrap();
    let out = dir.path().join("locked");
    fs::create_dir(&out).unwrap();
    fs::set_permissions(&out, fs::Permissions::from_mode(0o555)).unwrap();
    let assert = Command::cargo_bin("linbudget")
        .unwrap()
        .arg("run")
        .arg(&plan)
        .arg("--out")
        .arg(&out)
        .timeout(HANG_GUARD)
        .assert();
    let entries = fs::read_dir(&out).unwrap().count();
    // Writability is decided by trying, not by the permission bits: as root the folder takes
    // the report, as anyone else it is refused with nothing written.
    let writable = fs::create_dir(out.join("probe")).is_ok();
    let _ = fs::remove_dir(out.join("probe"));
    fs::set_permissions(&out, fs::Permissions::from_mode(0o755)).unwrap();
    if writable {
        assert.code(0);
        assert_eq!(entries, 1);
    } else {
        assert.code(2).stderr(predicate::str::contains("locked"));
        assert_eq!(entries, 0);
    }
}

#[test]
fn a_good_plan_still_runs_after_all_the_guards() {
    let dir = tempfile::tempdir().unwrap();
    run_plan(dir.path(), GOOD).code(predicate::in_iter([0, 1]));
    assert!(dir.path().join("out/good/report.json").exists());
}

/// A run killed while writing leaves its staging folder `.NAME.partial-PID`; the next run of
/// the same report removes it once that process is gone (reaped or not).
#[cfg(unix)]
#[test]
fn the_staging_folder_of_a_killed_run_is_gone_after_the_next_run() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("out");
    fs::create_dir(&out).unwrap();
    let mut leftovers = Vec::new();
    for reap in [true, false] {
        let mut child = std::process::Command::new("sleep")
            .arg("100")
            .spawn()
            .unwrap();
        child.kill().unwrap();
        if reap {
            child.wait().unwrap();
        }
        let staging = out.join(format!(".good.partial-{}", child.id()));
        fs::create_dir(&staging).unwrap();
        fs::write(staging.join("report.json"), "{\"half\": ").unwrap();
        leftovers.push((staging, child));
    }
    let plan = dir.path().join("plan.yaml");
    fs::write(&plan, GOOD).unwrap();
    Command::cargo_bin("linbudget")
        .unwrap()
        .arg("run")
        .arg(&plan)
        .arg("--out")
        .arg(&out)
        .timeout(HANG_GUARD)
        .assert()
        .code(predicate::in_iter([0, 1]));
    for (staging, mut child) in leftovers {
        assert!(!staging.exists(), "{} was left", staging.display());
        let _ = child.wait();
    }
    let names: Vec<_> = fs::read_dir(&out)
        .unwrap()
        .map(|e| e.unwrap().file_name())
        .collect();
    assert_eq!(names, vec![std::ffi::OsString::from("good")]);
}

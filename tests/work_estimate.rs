//! The work limit is a time: `--max-work` takes a duration, a plan over it is refused with an
//! override that is itself accepted, and cheap large plans are admitted.

use assert_cmd::Command;
use predicates::prelude::*;

fn check(args: &[&str], plan: &std::path::Path) -> assert_cmd::assert::Assert {
    Command::cargo_bin("linbudget")
        .unwrap()
        .arg("check")
        .args(args)
        .arg(plan)
        .assert()
}

fn demo(name: &str) -> std::path::PathBuf {
    std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("specs")
        .join(name)
}

#[test]
fn durations_are_accepted_as_limits() {
    let plan = demo("sensor-front-end.yaml");
    for limit in ["10min", "90s", "1.5h", "1h30min", "3600"] {
        check(&["--max-work", limit], &plan).code(0);
    }
    check(&["--max-work", "10 parsecs"], &plan)
        .code(2)
        .stderr(predicate::str::contains("duration"));
}

/// A plan over the limit is refused, and the `--max-work` value the message suggests admits it.
#[test]
fn the_suggested_override_is_accepted() {
    let plan = demo("ultrasound-probe-wideband.yaml");
    let refused = check(&["--max-work", "1ms"], &plan).code(2);
    let stderr = String::from_utf8_lossy(&refused.get_output().stderr).into_owned();
    let suggested = stderr
        .split("--max-work ")
        .nth(1)
        .and_then(|rest| rest.split('`').next())
        .unwrap_or_else(|| panic!("no override in: {stderr}"))
        .to_owned();
    assert!(
        stderr.contains("drive."),
        "points at the key that dominates: {stderr}"
    );
    check(&["--max-work", &suggested], &plan).code(0);
}

/// 60,000 Monte Carlo runs of the strain-logger demo are a few seconds of work: admitted
/// under the default limit; a trillion are not.
#[test]
fn a_cheap_large_population_is_admitted_and_an_absurd_one_refused() {
    let text = std::fs::read_to_string(demo("strain-logger-corners.yaml")).unwrap();
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("population.yaml");
    std::fs::write(&path, text.replace("runs: 2000", "runs: 60000")).unwrap();
    check(&[], &path).code(0);
    std::fs::write(&path, text.replace("runs: 2000", "runs: 1000000000000")).unwrap();
    check(&[], &path)
        .code(2)
        .stderr(predicate::str::contains("monte_carlo.runs"))
        .stderr(predicate::str::contains("--max-work"));
}

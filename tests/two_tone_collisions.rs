//! Two-tone products that share a frequency in the tones' common period, found from the plan
//! alone with the product frequency algebra m·f1 + n·f2 (common practice): a reported product
//! on one of lower order is refused at `drive.two_tone_spacing` with a spacing that separates
//! them; one on a product of much higher order sets that figure's floor. Memoryless stages
//! are analysed on the torus of the two phases, where products cannot collide.

use assert_cmd::Command;
use linbudget::{Plan, PlanError};

const CAPACITIVE: &str = "  - name: wide
    tail_current: 2 mA
    load_resistance: 1k
    load_capacitance: 1 pF
    supply: 5 V
    input_common_mode: 2.5 V
    transistor: {beta: 100}
";
const MEMORYLESS: &str = "  - {name: flat, tail_current: 2 mA, load_resistance: 1k}\n";

fn plan(stage: &str, frequency: &str, spacing: &str) -> String {
    format!(
        "name: tones\nstages:\n{stage}drive:\n  amplitudes: [20 mV]\n  frequencies: [{frequency}]\n  two_tone_spacing: {spacing}\n"
    )
}

fn refused(text: &str) -> PlanError {
    match Plan::from_yaml(text, "tones.yaml") {
        Ok(_) => panic!("accepted colliding products:\n{text}"),
        Err(err) => err,
    }
}

/// The suggested spacing, read from the accepted text ("e.g. 480000 Hz").
fn suggestion(err: &PlanError) -> String {
    err.accepted
        .split("e.g. ")
        .nth(1)
        .and_then(|rest| rest.split(' ').next())
        .unwrap_or_else(|| panic!("no suggestion in {err}"))
        .to_owned()
}

/// f = 1 MHz, Δ = 500 kHz: f1 = 2·f0, f2 = 3·f0, so 2f1 − f2 = f0 = f2 − f1 (IM3 on IM2).
#[test]
fn im3_on_im2_is_refused_with_a_spacing_that_separates_them() {
    let text = plan(CAPACITIVE, "1 MHz", "500 kHz");
    let err = refused(&text);
    assert_eq!(err.key_path, "drive.two_tone_spacing");
    assert_eq!((err.line, err.column), (13, 21));
    assert!(
        err.problem.contains("2f1 − f2") && err.problem.contains("f2 − f1"),
        "{err}"
    );
    let spacing = suggestion(&err);
    let fixed = plan(CAPACITIVE, "1 MHz", &spacing);
    assert!(
        Plan::from_yaml(&fixed, "tones.yaml").is_ok(),
        "{spacing} is refused too"
    );
}

/// f = 1 MHz, Δ = 1 MHz: 2f1 − f2 falls at DC and f2 − f1 on f1 itself.
#[test]
fn im3_at_dc_and_im2_on_the_fundamental_are_refused() {
    let err = refused(&plan(CAPACITIVE, "1 MHz", "1 MHz"));
    assert!(
        err.problem.contains("DC") || err.problem.contains("f1 (order 1)"),
        "{err}"
    );
}

/// f = 1 MHz, Δ = 2 MHz: f2 − f1 = 2 MHz = 2f1, IM2 on the second harmonic of the lower tone.
#[test]
fn im2_on_a_harmonic_is_refused() {
    let err = refused(&plan(CAPACITIVE, "1 MHz", "2 MHz"));
    assert!(err.problem.contains("IM"), "{err}");
    assert_eq!(err.key_path, "drive.two_tone_spacing");
}

/// A common period over 1024 upper-tone cycles is found at `check`, with a line.
#[test]
fn a_common_period_too_long_is_refused_at_check() {
    let err = refused(&plan(CAPACITIVE, "1 MHz", "1.2345 kHz"));
    assert_eq!(err.key_path, "drive.two_tone_spacing");
    assert!(err.problem.contains("1024"), "{err}");
    let fixed = plan(CAPACITIVE, "1 MHz", &suggestion(&err));
    assert!(Plan::from_yaml(&fixed, "tones.yaml").is_ok());
}

/// Budget lines at other frequencies are checked too.
#[test]
fn an_im3_line_at_a_colliding_frequency_is_refused() {
    let text = format!(
        "{}budget:\n  - {{metric: im3, at: 20 mV, frequency: 1 MHz, max: -40}}\n",
        plan(CAPACITIVE, "10 MHz", "500 kHz")
    );
    assert_eq!(refused(&text).key_path, "drive.two_tone_spacing");
}

/// The same spacings through a memoryless stage: the torus analysis keeps every product on
/// its own coefficient, so the rule does not apply and the plan is accepted.
#[test]
fn memoryless_stages_are_not_concerned() {
    for spacing in ["500 kHz", "1 MHz", "2 MHz", "1.2345 kHz"] {
        let text = plan(MEMORYLESS, "1 MHz", spacing);
        assert!(Plan::from_yaml(&text, "tones.yaml").is_ok(), "{spacing}");
    }
}

/// f/Δ = 10 (f1 = 10·f0, f2 = 11·f0): the odd products 2f1 − f2, 3f1 − 2f2, … step down by Δ
/// until 10f1 − 9f2 (order 19) lands on f2 − f1. A matched pair has no IM2 of its own, so what
/// that bin holds is the 19th-order product: IM2 is reported null, with the product named and
/// the floor it sets.
#[test]
fn a_much_higher_order_product_on_im2_sets_its_floor() {
    let text = plan(CAPACITIVE, "1 MHz", "100 kHz").replace("[20 mV]", "[50 mV, 150 mV]");
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("tones.yaml");
    std::fs::write(&path, &text).unwrap();
    let output = Command::cargo_bin("linbudget")
        .unwrap()
        .args([
            "run",
            path.to_str().unwrap(),
            "--json",
            "--no-figures",
            "--out",
        ])
        .arg(dir.path().join("out"))
        .output()
        .unwrap();
    assert_eq!(
        output.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&output.stderr)
    );
    let report: linbudget::Report = serde_json::from_slice(&output.stdout).unwrap();
    let limited: Vec<_> = report
        .points
        .iter()
        .filter(|p| p.im2_limited_by.is_some())
        .collect();
    assert!(!limited.is_empty(), "IM2 is limited at some drive");
    for point in &limited {
        assert_eq!(point.im2_limited_by.as_deref(), Some("10f1 − 9f2"));
        assert_eq!(
            point.im2_dbc.flatten(),
            None,
            "a matched pair has no IM2 of its own"
        );
        assert!(point.im2_floor_dbc.unwrap() > point.floor_dbc);
    }
    assert!(report.warnings.iter().any(|w| w.contains("10f1 − 9f2")));
}

//! The general forward-active static solve (Early effect, finite tail resistance) against an
//! independent 50-digit solution of the same equations: `tests/reference/forward_pair_general.py`
//! (mpmath's multidimensional Newton, written from the model in specs/README.md). Each row is
//! (I_S mismatch, v_d in V, tail voltage in V, I_C,P and I_C,M in A, output V_C,M − V_C,P = R_L·(I_C,P − I_C,M)
//! in V), printed by `python3 forward_pair_general.py table` and rounded to 20 digits.

// The reference digits are kept as the script printed them.
#![allow(clippy::excessive_precision)]

use linbudget::model::circuit::StageCircuit;
use linbudget::solve::transfer::{StaticSolver, WarmStart};
use linbudget::{Mismatch, Stage, Transistor};

const REFERENCE: [(f64, f64, f64, f64, f64, f64); 10] = [
    (
        0.0,
        0.0,
        0.64295603615846768521,
        0.00050206791275634425063,
        0.00050206791275634425063,
        0.0,
    ),
    (
        0.0,
        0.001,
        0.64295623254948361588,
        0.00050402780341004902691,
        0.00050010802395442703902,
        0.0078395589112439757767,
    ),
    (
        0.0,
        -0.05,
        0.64345395466085257845,
        0.0004043308019366425749,
        0.00059980981594390556615,
        -0.3909580280145259825,
    ),
    (
        0.0,
        0.3,
        0.6768757137599699062,
        0.00098625615273457551251,
        0.000018424926395854575442,
        1.9356624526774418741,
    ),
    (
        0.0,
        -0.9,
        0.97119882638141289611,
        2.2255766648264039051e-15,
        0.001010468685522836044,
        -2.0209373710412209346,
    ),
    (
        0.01,
        0.0,
        0.64308436114817864064,
        0.00050257358404938063573,
        0.00050156477024618548772,
        0.0020176276063902960242,
    ),
    (
        0.01,
        0.001,
        0.64308465862723249215,
        0.00050453347417436694926,
        0.00049960488292614267367,
        0.0098571824964485511847,
    ),
    (
        0.01,
        -0.05,
        0.64357708027079454575,
        0.00040483244068285138098,
        0.00059931065490435886736,
        -0.38895642844301497276,
    ),
    (
        0.01,
        0.3,
        0.67710000106879538134,
        0.00098639962956144117889,
        0.00001828579680801816426,
        1.9362276655068460293,
    ),
    (
        0.01,
        -0.9,
        0.97119882638141797198,
        2.2478324314738330209e-15,
        0.0010104686855228139001,
        -2.0209373710411321354,
    ),
];

/// The stage of the reference script: 1 mA tail with 50 kΩ, R_L 2 kΩ, R_E 200 Ω, R_B 120 Ω,
/// β 110, V_A 70 V, 5 V supply, 1.5 V input common mode, I_S 1e-16 A, 27 °C.
fn solver(mismatch: f64) -> StaticSolver {
    let stage = Stage::new("reference", 1e-3, 2e3)
        .emitter_resistance(200.0)
        .tail_resistance(50e3)
        .supply(5.0)
        .input_common_mode(1.5)
        .transistor(
            Transistor::default()
                .saturation_current(1e-16)
                .beta(110.0)
                .early_voltage(70.0)
                .base_resistance(120.0),
        )
        .mismatch(Mismatch::default().saturation_current(mismatch));
    StaticSolver::new(StageCircuit::new(&stage, 27.0))
}

/// Tolerances: 1e-13 relative on the tail voltage and each collector current (the solve
/// converges to a few ulps of ln J, so about 1e-14 relative is expected), and 1e-14 V plus
/// 1e-13 relative on the output, which is formed from the current difference.
fn check(
    point: &linbudget::solve::transfer::OperatingPoint,
    row: &(f64, f64, f64, f64, f64, f64),
    how: &str,
) {
    let &(mismatch, v_d, tail, i_p, i_m, out) = row;
    let rel = |got: f64, want: f64| (got - want).abs() / want.abs();
    let at = format!("{how}, mismatch {mismatch}, v_d = {v_d} V");
    assert!(
        rel(point.tail_voltage, tail) <= 1e-13,
        "{at}: tail {} vs {tail}",
        point.tail_voltage
    );
    assert!(
        rel(point.p.collector_current, i_p) <= 1e-13,
        "{at}: I_C,P {:e} vs {i_p:e}",
        point.p.collector_current
    );
    assert!(
        rel(point.m.collector_current, i_m) <= 1e-13,
        "{at}: I_C,M {:e} vs {i_m:e}",
        point.m.collector_current
    );
    assert!(
        (point.output_voltage - out).abs() <= 1e-14 + 1e-13 * out.abs(),
        "{at}: output {:e} vs {out:e}",
        point.output_voltage
    );
}

/// Each point solved afresh (the joint Newton from the reduced solution).
#[test]
fn cold_solves_match_the_fifty_digit_reference() {
    for row in &REFERENCE {
        let point = solver(row.0).solve_cold(row.1).expect("solve");
        check(&point, row, "cold");
    }
}

/// The points solved in turn with one warm start, as the samples of a waveform are (the joint
/// Newton from the last two solutions extrapolated, including the long jumps between rows).
#[test]
fn warm_started_solves_match_the_fifty_digit_reference() {
    for mismatch in [0.0, 0.01] {
        let s = solver(mismatch);
        let mut warm = WarmStart::default();
        for _ in 0..2 {
            for row in REFERENCE.iter().filter(|r| r.0 == mismatch) {
                let point = s.solve(row.1, &mut warm).expect("solve");
                check(&point, row, "warm");
            }
        }
    }
}

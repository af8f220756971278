//! The linearising topologies against references from outside the project: the multi-tanh
//! sum-of-tanh law (Gilbert, "The multi-tanh principle: a tutorial overview", IEEE JSSC 33(1),
//! 1998 — from memory), the split tail's Π network solved directly, the equivalence of
//! parallel devices, and hand analyses of the small-signal noise circuit (Gray & Meyer's noise
//! chapter, from memory). Every reference here is computed in the test from its formula, with
//! its own root finder and a direct DFT; none is a value copied from the tool's output.

use linbudget::units::{thermal_voltage, BOLTZMANN, ZERO_CELSIUS_K};
use linbudget::{Mismatch, MultiTanh, Stage, TanhPair, Topology, Transistor};
use std::f64::consts::TAU;

const T: f64 = 27.0;

/// A stage biased so that nothing saturates in these tests (ideal transistor unless set).
fn base(name: &str, tail: f64, load: f64) -> Stage {
    Stage::new(name, tail, load)
        .supply(12.0)
        .input_common_mode(2.5)
}

/// Harmonic `order` of `transfer(a·cos θ)` relative to the fundamental, dB, by a direct DFT
/// over `n` samples (the test's own analyser, not the tool's FFT).
fn reference_hd(transfer: &dyn Fn(f64) -> f64, amplitude: f64, order: usize) -> f64 {
    let n = 4096;
    let coefficient = |k: usize| -> f64 {
        let (mut re, mut im) = (0.0, 0.0);
        for i in 0..n {
            let theta = TAU * i as f64 / n as f64;
            let y = transfer(amplitude * theta.cos());
            re += y * (k as f64 * theta).cos();
            im += y * (k as f64 * theta).sin();
        }
        (re * re + im * im).sqrt()
    };
    20.0 * (coefficient(order) / coefficient(1)).log10()
}

fn tool_hd(stage: &Stage, amplitude: f64, order: usize) -> f64 {
    stage
        .at(T)
        .unwrap()
        .tone(amplitude, 1e3)
        .unwrap()
        .hd_dbc(order)
        .expect("above the analysis floor")
}

/// The multi-tanh law: pair k with tail fraction f_k and offset V_k gives
/// `f_k·I·tanh((v + V_k)/2φT)`, `V_k = φT·ln(area_p/area_m)`.
fn sum_of_tanh(pairs: &[(f64, f64)], tail: f64, load: f64) -> impl Fn(f64) -> f64 + '_ {
    let phi = thermal_voltage(T);
    move |v| {
        pairs
            .iter()
            .map(|(fraction, offset)| fraction * tail * load * ((v + offset) / (2.0 * phi)).tanh())
            .sum()
    }
}

#[test]
fn doublet_at_two_plus_root_three_matches_the_sum_of_tanh_at_five_amplitudes() {
    // Gilbert (1998, from memory): doublet output I/2·[tanh((v+V_o)/2φT) + tanh((v−V_o)/2φT)],
    // V_o = φT·ln A. Tolerance 0.1 dB.
    let a = 2.0 + 3f64.sqrt();
    let phi = thermal_voltage(T);
    let v_o = phi * a.ln();
    let stage = base("doublet", 2e-3, 1e3).multi_tanh(MultiTanh::doublet(a));
    let pairs = [(0.5, v_o), (0.5, -v_o)];
    let reference = sum_of_tanh(&pairs, 2e-3, 1e3);
    for amplitude in [2e-3, 5e-3, 10e-3, 20e-3, 40e-3] {
        for order in [3, 5] {
            let tool = tool_hd(&stage, amplitude, order);
            let expected = reference_hd(&reference, amplitude, order);
            assert!(
                (tool - expected).abs() < 0.1,
                "HD{order} at {amplitude} V: tool {tool} dBc, sum of tanh {expected} dBc"
            );
        }
    }
}

#[test]
fn doublet_third_order_vanishes_at_two_plus_root_three_and_hd3_rises_four_to_one() {
    // Gilbert (1998, from memory): the third-order term of the doublet vanishes at
    // A = 2 + √3, so HD3 follows the fifth-order law, a 4:1 slope in dBc against amplitude
    // (12.04 dB per doubling); either side of that ratio the cubic term returns (2:1).
    let a = 2.0 + 3f64.sqrt();
    let stage = |ratio: f64| base("doublet", 2e-3, 1e3).multi_tanh(MultiTanh::doublet(ratio));
    let at_null = stage(a);
    let slope = (tool_hd(&at_null, 2e-3, 3) - tool_hd(&at_null, 1e-3, 3)) / (20.0 * 2f64.log10());
    assert!((slope - 4.0).abs() < 0.05, "HD3 slope at A = 2+√3: {slope}");
    for off in [3.0, 4.5] {
        let s = stage(off);
        let slope = (tool_hd(&s, 2e-3, 3) - tool_hd(&s, 1e-3, 3)) / (20.0 * 2f64.log10());
        assert!(
            (slope - 2.0).abs() < 0.05,
            "HD3 slope at A = {off}: {slope}"
        );
    }
    // The null: at 0.5 mV HD3 is least near A = 2 + √3 on a grid of ratios.
    let ratios: Vec<f64> = (0..=30).map(|k| 3.5 + 0.0155 * k as f64).collect();
    let best = ratios
        .iter()
        .map(|&r| (r, tool_hd(&stage(r), 0.5e-3, 3)))
        .min_by(|x, y| x.1.total_cmp(&y.1))
        .unwrap();
    assert!((best.0 - a).abs() < 0.02, "least HD3 at A = {}", best.0);
}

#[test]
fn triplet_matches_the_sum_of_three_offset_tanh_pairs() {
    // Multi-tanh law (Gilbert 1998, from memory) with a centre pair: outer pairs A:1 and 1:A
    // with (1 − c)/2 of the current each, centre pair 1:1 with c. Tolerance 0.05 dB.
    let (a, c) = (10.0, 0.3);
    let phi = thermal_voltage(T);
    let v_o = phi * f64::ln(a);
    let stage = base("triplet", 3e-3, 800.0).multi_tanh(MultiTanh::triplet(a, c));
    let pairs = [(0.5 * (1.0 - c), v_o), (c, 0.0), (0.5 * (1.0 - c), -v_o)];
    let reference = sum_of_tanh(&pairs, 3e-3, 800.0);
    for amplitude in [5e-3, 20e-3, 50e-3, 100e-3] {
        for order in [3, 5] {
            let tool = tool_hd(&stage, amplitude, order);
            let expected = reference_hd(&reference, amplitude, order);
            assert!(
                (tool - expected).abs() < 0.05,
                "HD{order} at {amplitude} V: tool {tool} dBc, reference {expected} dBc"
            );
        }
    }
}

#[test]
fn split_tail_with_ideal_sources_has_the_emitter_resistor_transfer_and_more_headroom() {
    // Common practice: with ideal sources the resistor 2R_E between the emitters carries
    // (I_P − I_M)/2, so the differential loop is the emitter-resistor form's (exact), while the
    // sources sit at the emitters, I·R_E/2 above the common tail node of that form.
    let (tail, r_e) = (2e-3, 150.0);
    let resistors = base("resistors", tail, 1.5e3)
        .emitter_resistance(r_e)
        .transistor(Transistor::default().beta(80.0).base_resistance(120.0));
    let split = resistors.clone().topology(Topology::SplitTail);
    for amplitude in [10e-3, 100e-3, 400e-3] {
        for order in [3, 5] {
            let (a, b) = (
                tool_hd(&resistors, amplitude, order),
                tool_hd(&split, amplitude, order),
            );
            assert!(
                (a - b).abs() < 1e-9,
                "HD{order} at {amplitude} V: {a} vs {b}"
            );
        }
    }
    let nodes_r = resistors.at(T).unwrap().bias_nodes().unwrap();
    let nodes_s = split.at(T).unwrap().bias_nodes().unwrap();
    // β = 80: the emitter current per side is I/2 exactly (the tail source sets it).
    let expected = tail * r_e / 2.0;
    let gained = nodes_s.tail_source_v - nodes_r.tail_source_v;
    assert!(
        (gained - expected).abs() < 1e-9,
        "{gained} V vs {expected} V"
    );
    assert!((nodes_r.degeneration_drop_v() - expected).abs() < 1e-9);
    assert!(nodes_s.degeneration_drop_v().abs() < 1e-12);
}

/// The split tail's own circuit, solved directly: emitters at V_P, V_M; each source I_k with
/// R_t to ground; 2R_E between; exponential law with β → ∞. Returns I_CP − I_CM.
fn split_tail_direct(v: f64, currents: [f64; 2], r_t: f64, r_e: f64, i_s: f64, v_cm: f64) -> f64 {
    let phi = thermal_voltage(T);
    let base_p = v_cm + 0.5 * v;
    let base_m = v_cm - 0.5 * v;
    let g_b = 1.0 / (2.0 * r_e);
    let g_t = 1.0 / r_t;
    // Start from the balanced emitter voltage.
    let mut x = [
        v_cm - phi * (currents[0] / i_s).ln(),
        v_cm - phi * (currents[1] / i_s).ln(),
    ];
    for _ in 0..200 {
        let i_p = i_s * ((base_p - x[0]) / phi).exp();
        let i_m = i_s * ((base_m - x[1]) / phi).exp();
        let f = [
            i_p - currents[0] - g_t * x[0] - g_b * (x[0] - x[1]),
            i_m - currents[1] - g_t * x[1] - g_b * (x[1] - x[0]),
        ];
        let j = [[-i_p / phi - g_t - g_b, g_b], [g_b, -i_m / phi - g_t - g_b]];
        let det = j[0][0] * j[1][1] - j[0][1] * j[1][0];
        let dx = [
            (f[0] * j[1][1] - f[1] * j[0][1]) / det,
            (j[0][0] * f[1] - j[1][0] * f[0]) / det,
        ];
        // Damped to a few φT per step.
        let scale = (4.0 * phi / dx[0].abs().max(dx[1].abs())).min(1.0);
        x[0] -= scale * dx[0];
        x[1] -= scale * dx[1];
        if dx[0].abs().max(dx[1].abs()) < 1e-15 {
            break;
        }
    }
    i_s * ((base_p - x[0]) / phi).exp() - i_s * ((base_m - x[1]) / phi).exp()
}

#[test]
fn split_tail_with_real_unequal_sources_matches_a_direct_solve_of_its_network() {
    // Linear circuit theory and the exponential law: the Π network solved as it stands (two
    // emitter nodes, Newton in the test), against the tool's transformed form. 0.05 dB on
    // HD2 (from the source difference), HD3 and the gain.
    let (tail, load, r_e, r_tail, delta) = (1e-3, 2e3, 200.0, 20e3, 0.05);
    let stage = base("split", tail, load)
        .emitter_resistance(r_e)
        .tail_resistance(r_tail)
        .topology(Topology::SplitTail)
        .mismatch(Mismatch::default().tail_current(delta));
    let i_m = tail / (2.0 + delta);
    let currents = [i_m * (1.0 + delta), i_m];
    let i_s = Transistor::default().saturation_current_at(T);
    let reference = |v: f64| load * split_tail_direct(v, currents, 2.0 * r_tail, r_e, i_s, 2.5);
    for amplitude in [20e-3, 100e-3, 300e-3] {
        for order in [2, 3] {
            let tool = tool_hd(&stage, amplitude, order);
            let expected = reference_hd(&reference, amplitude, order);
            assert!(
                (tool - expected).abs() < 0.05,
                "HD{order} at {amplitude} V: tool {tool} dBc, direct {expected} dBc"
            );
        }
    }
    let h = 1e-6;
    let gain = (reference(h) - reference(-h)) / (2.0 * h);
    let tool = stage.at(T).unwrap().gain_db();
    assert!(
        (tool - 20.0 * gain.log10()).abs() < 0.05,
        "gain {tool} dB vs {gain}"
    );
}

#[test]
fn two_equal_pairs_of_a_cell_are_one_pair_of_twice_the_area() {
    // Common practice: identical devices in parallel are one device of twice the area
    // (twice I_S, half r_b). Here the two pairs are coupled through the shared source
    // resistance (base current) and the shared loads (Early effect, and saturation at the
    // largest drive), which the cell solve iterates; the single double-area pair has none.
    let transistor = Transistor::default()
        .beta(60.0)
        .early_voltage(20.0)
        .base_resistance(200.0);
    let common = base("cell", 2e-3, 2e3)
        .source_resistance(500.0)
        .emitter_resistance(30.0)
        .supply(4.0)
        .input_common_mode(2.6)
        .transistor(transistor);
    let two = common.clone().multi_tanh(MultiTanh::pairs_of(vec![
        TanhPair::new(1.0, 1.0, 0.5),
        TanhPair::new(1.0, 1.0, 0.5),
    ]));
    // Two 30 Ω emitter resistors in parallel are one of 15 Ω.
    let one = common.multi_tanh(MultiTanh::pairs_of(vec![TanhPair {
        emitter_resistance: Some(15.0),
        ..TanhPair::new(2.0, 2.0, 1.0)
    }]));
    for amplitude in [10e-3, 100e-3, 600e-3] {
        let (a, b) = (one.at(T).unwrap(), two.at(T).unwrap());
        let (ta, tb) = (
            a.tone(amplitude, 1e3).unwrap(),
            b.tone(amplitude, 1e3).unwrap(),
        );
        let (ga, gb) = (ta.gain_db(), tb.gain_db());
        assert!((ga - gb).abs() < 1e-6, "{amplitude} V: {ga} vs {gb}");
        for order in [2, 3] {
            let (x, y) = (ta.hd_dbc(order), tb.hd_dbc(order));
            if let (Some(x), Some(y)) = (x, y) {
                if x > -150.0 {
                    assert!(
                        (x - y).abs() < 1e-3,
                        "HD{order} at {amplitude} V: {x} vs {y}"
                    );
                }
            }
        }
    }
    let saturating = two.at(T).unwrap().tone(600e-3, 1e3).unwrap();
    assert!(
        !saturating.is_forward_active(),
        "the largest drive should saturate"
    );
}

fn kt() -> f64 {
    BOLTZMANN * (T + ZERO_CELSIUS_K)
}

#[test]
fn split_tail_noise_adds_the_sources_through_the_emitter_resistor() {
    // Hand analysis (Gray & Meyer's noise chapter, from memory): with ideal sources, a current
    // i drawn at one emitter changes I_P − I_M by i·R_E/(R_E + 1/g_m), which the input sees as
    // i·R_E; two uncorrelated sources of density i_n/√2 (half the current each) add i_n²·R_E²
    // to the pair's e_n² = 2·[4kT(r_b + R_E) + 2kT/g_m + 4kT/(G²R_L)] (the resistor 2R_E
    // between the emitters is the same 4kT·2R_E as two resistors R_E). 1 %.
    let (tail, load, r_e, r_b, i_n) = (1e-3, 3e3, 250.0, 100.0, 20e-12);
    let stage = base("split", tail, load)
        .emitter_resistance(r_e)
        .tail_noise_current(i_n)
        .topology(Topology::SplitTail)
        .transistor(Transistor::default().base_resistance(r_b));
    let gm = tail / 2.0 / thermal_voltage(T);
    let g = gm / (1.0 + gm * r_e);
    let pair = 2.0 * (4.0 * kt() * (r_b + r_e) + 2.0 * kt() / gm + 4.0 * kt() / (g * g * load));
    let expected = (pair + i_n * i_n * r_e * r_e).sqrt();
    let solved = stage.at(T).unwrap();
    let measured = solved.input_noise_v_rthz();
    assert!(
        (measured / expected - 1.0).abs() < 0.01,
        "{measured:e} vs {expected:e}"
    );
    // One source feeding a matched emitter-resistor pair is common mode: no tail term.
    let resistors = stage.clone().topology(Topology::EmitterResistors);
    let tail_part = resistors
        .at(T)
        .unwrap()
        .noise_breakdown()
        .unwrap()
        .tail_sources_v2;
    assert!(tail_part < 1e-6 * pair, "{tail_part:e}");
}

#[test]
fn doublet_noise_matches_the_hand_analysis_of_its_two_unbalanced_pairs() {
    // Hand analysis (from memory): at zero input pair 1 carries I_a = f·I·A/(A+1) in its P
    // transistor and I_b = f·I/(A+1) in its M transistor (pair 2 the mirror image); a series
    // voltage at any of its bases moves I_P − I_M by G_k = 2·I_a·I_b/(φT·(I_a + I_b)), and
    // the cell's G = Σ G_k. Input-referred: Σ_devices (G_k/G)²·2kT·φT/I_C
    // + 2·4kT·R_L/(G·R_L)² + Σ_pairs i_n²·f·((I_a − I_b)/(I_a + I_b))²/G². 1 %.
    let (tail, load, a, i_n) = (2e-3, 1e3, 2.0 + 3f64.sqrt(), 30e-12);
    let stage = base("doublet", tail, load)
        .tail_noise_current(i_n)
        .multi_tanh(MultiTanh::doublet(a));
    let phi = thermal_voltage(T);
    let f = 0.5;
    let (i_a, i_b) = (f * tail * a / (a + 1.0), f * tail / (a + 1.0));
    let g_k = 2.0 * i_a * i_b / (phi * (i_a + i_b));
    let g = 2.0 * g_k;
    let devices: f64 = 2.0
        * [i_a, i_b]
            .iter()
            .map(|i| (g_k / g).powi(2) * 2.0 * kt() * phi / i)
            .sum::<f64>();
    let loads = 2.0 * 4.0 * kt() * load / (g * load).powi(2);
    let tails = 2.0 * i_n * i_n * f * ((i_a - i_b) / (i_a + i_b)).powi(2) / (g * g);
    let expected = (devices + loads + tails).sqrt();
    let measured = stage.at(T).unwrap().input_noise_v_rthz();
    assert!(
        (measured / expected - 1.0).abs() < 0.01,
        "{measured:e} vs {expected:e}"
    );
    let breakdown = stage.at(T).unwrap().noise_breakdown().unwrap();
    assert!((breakdown.tail_sources_v2 / tails - 1.0).abs() < 0.01);
    assert_eq!(breakdown.resistors_v2, 0.0, "no resistor in this cell");
}

/// x = (I_P − I_M)/I of a degenerated pair at input v: v = 2φT·atanh(x) + I·R_E·x (KVL with
/// the exponential law, ideal tail and β → ∞), by bisection in the test.
fn degenerated_fraction(v: f64, tail: f64, r_e: f64) -> f64 {
    let phi = thermal_voltage(T);
    let (mut low, mut high) = (-1.0f64, 1.0f64);
    for _ in 0..200 {
        let mid = 0.5 * (low + high);
        if 2.0 * phi * mid.atanh() + tail * r_e * mid > v {
            high = mid;
        } else {
            low = mid;
        }
    }
    0.5 * (low + high)
}

#[test]
fn equal_current_ordering_matches_an_independent_solve() {
    // The comparison at equal tail current ranks the four schemes by HD3 the way the test's own
    // solves do: the implicit degenerated transfer (bare: R_E = 0; emitter resistors and, with
    // ideal sources, the split tail: R_E) and the doublet's sum of tanh (Gilbert 1998, from
    // memory). The planned currents differ; the comparison sets them all to 2 mA. Values
    // within 0.05 dB, and the same order at every amplitude.
    use linbudget::model::plan::{ComparisonBasis, ComparisonSettings};
    use linbudget::{Drive, Plan};
    let (tail, load, r_e, a) = (2e-3, 1e3, 60.0, 2.0 + 3f64.sqrt());
    let stages = vec![
        base("bare", 0.5e-3, load),
        base("resistors", 1e-3, load).emitter_resistance(r_e),
        base("split", 3e-3, load)
            .emitter_resistance(r_e)
            .topology(Topology::SplitTail),
        base("doublet", 1e-3, load).multi_tanh(MultiTanh::doublet(a)),
    ];
    let amplitudes = vec![5e-3, 20e-3, 60e-3];
    let mut plan = Plan::new("schemes", stages, Drive::new(amplitudes.clone()));
    plan.comparison = Some(ComparisonSettings {
        basis: ComparisonBasis::TailCurrent,
        value: Some(tail),
    });
    let report = plan.evaluate().unwrap();
    let comparison = report.scheme_comparison.expect("asked for");
    let phi = thermal_voltage(T);
    let v_o = phi * a.ln();
    let pairs = [(0.5, v_o), (0.5, -v_o)];
    let doublet = sum_of_tanh(&pairs, tail, load);
    let bare = |v: f64| degenerated_fraction(v, tail, 0.0);
    let resistors = |v: f64| degenerated_fraction(v, tail, r_e);
    for (i, &amplitude) in amplitudes.iter().enumerate() {
        let expected = [
            reference_hd(&bare, amplitude, 3),
            reference_hd(&resistors, amplitude, 3),
            reference_hd(&resistors, amplitude, 3),
            reference_hd(&doublet, amplitude, 3),
        ];
        let tool: Vec<f64> = comparison
            .rows
            .iter()
            .map(|r| r.hd3_dbc[i].expect("above the floor"))
            .collect();
        for (row, (t, e)) in comparison.rows.iter().zip(tool.iter().zip(expected)) {
            assert!(
                (t - e).abs() < 0.05,
                "{} at {amplitude} V: {t} vs {e}",
                row.stage
            );
            assert_eq!(row.tail_current_a, tail);
        }
        let order = |values: &[f64]| {
            let mut index: Vec<usize> = (0..values.len()).collect();
            index.sort_by(|&x, &y| values[x].total_cmp(&values[y]));
            // The split tail and the resistors are equal: rank them as one.
            index.retain(|&k| k != 2);
            index
        };
        assert_eq!(order(&tool), order(&expected), "order at {amplitude} V");
    }
}

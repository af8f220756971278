//! Sizing with the tail current as a variable: the least supply current meeting every budget
//! line (by the guard band), checked against a brute-force grid search of the exact model
//! written here with the public library calls only (`Stage::new(..).at(T)?.tone(..)`,
//! `input_noise_v_rthz`, `gain_db`), and the plan keys of the contract through the binary.

use assert_cmd::Command;
use linbudget::report::Report;
use linbudget::{BudgetLine, Drive, Limit, Metric, Plan, SizingSettings, Stage};

const LOAD_OHM: f64 = 2e3;
const SUPPLY_V: f64 = 5.0;
const AMPLITUDE_V: f64 = 0.1;

/// The budget of the brute-force search: each figure of one design, judged with the guard band.
struct Budget {
    hd3_max_dbc: f64,
    noise_max_v_rthz: Option<f64>,
    gain_min_db: f64,
    guard_band_db: f64,
    temperatures_c: Vec<f64>,
}

impl Budget {
    /// Whether the design (tail current, emitter resistance) meets every line by the guard
    /// band at every temperature, by the library's public calls.
    fn holds(&self, tail_current: f64, emitter_resistance: f64) -> bool {
        let stage = Stage::new("grid", tail_current, LOAD_OHM)
            .emitter_resistance(emitter_resistance)
            .supply(SUPPLY_V);
        self.temperatures_c.iter().all(|&t| {
            let solved = stage.at(t).unwrap();
            let hd3 = solved
                .tone(AMPLITUDE_V, 1e3)
                .unwrap()
                .hd_dbc(3)
                .unwrap_or(-400.0);
            let noise_ok = self.noise_max_v_rthz.is_none_or(|limit| {
                // A max line in V/√Hz has its margin in dB: 20·log10(limit / value).
                20.0 * (limit / solved.input_noise_v_rthz()).log10() >= self.guard_band_db
            });
            hd3 <= self.hd3_max_dbc - self.guard_band_db
                && noise_ok
                && solved.gain_db() >= self.gain_min_db + self.guard_band_db
        })
    }

    /// Least tail current on a grid in `currents` for which some emitter resistance in
    /// `resistances` holds, with that resistance.
    fn least_on_grid(&self, currents: &[f64], resistances: &[f64]) -> Option<(f64, f64)> {
        currents.iter().find_map(|&i| {
            resistances
                .iter()
                .find(|&&r| self.holds(i, r))
                .map(|&r| (i, r))
        })
    }

    /// Brute force: a coarse grid over the whole plane, then a fine grid (0.1 % steps in
    /// current, 0.5 Ω in resistance) between the last coarse row that fails and the first
    /// that holds, around the resistances that hold there.
    fn least_tail_current(&self, currents: (f64, f64), resistances: (f64, f64)) -> (f64, f64) {
        let coarse_i: Vec<f64> = (0..=60)
            .map(|k| currents.0 * (currents.1 / currents.0).powf(k as f64 / 60.0))
            .collect();
        let coarse_r: Vec<f64> = (0..=100)
            .map(|k| resistances.0 + (resistances.1 - resistances.0) * k as f64 / 100.0)
            .collect();
        let (i_coarse, r_coarse) = self
            .least_on_grid(&coarse_i, &coarse_r)
            .expect("some coarse design holds");
        let k = coarse_i.iter().position(|&i| i == i_coarse).unwrap();
        assert!(k > 0, "the coarse answer is the range's end");
        let low = coarse_i[k - 1];
        let steps = ((i_coarse / low).ln() / 1e-3_f64.ln_1p()).ceil() as usize;
        let fine_i: Vec<f64> = (0..=steps)
            .map(|s| low * (i_coarse / low).powf(s as f64 / steps as f64))
            .collect();
        let span = 2.0 * (coarse_r[1] - coarse_r[0]);
        let fine_r: Vec<f64> = (0..=(2.0 * span / 0.5) as usize)
            .map(|s| (r_coarse - span + 0.5 * s as f64).max(resistances.0))
            .collect();
        self.least_on_grid(&fine_i, &fine_r)
            .expect("the coarse answer holds on the fine grid")
    }
}

fn sized_plan(budget: &Budget, currents: (f64, f64), resistances: (f64, f64)) -> Plan {
    let mut plan = Plan::new(
        "least-current",
        vec![Stage::new("pair", 1e-3, LOAD_OHM).supply(SUPPLY_V)],
        Drive::new(vec![0.01, AMPLITUDE_V]),
    )
    .temperatures_c(budget.temperatures_c.clone())
    .budget_line(
        BudgetLine::new(Metric::Harmonic(3), Limit::Max(budget.hd3_max_dbc)).at(AMPLITUDE_V),
    )
    .budget_line(BudgetLine::new(
        Metric::Gain,
        Limit::Min(budget.gain_min_db),
    ));
    if let Some(noise) = budget.noise_max_v_rthz {
        plan = plan.budget_line(BudgetLine::new(Metric::InputNoise, Limit::Max(noise)));
    }
    plan.sizing(
        SizingSettings::new(resistances.0, resistances.1)
            .tail_current(currents.0, currents.1)
            .guard_band_db(budget.guard_band_db),
    )
}

#[test]
fn least_current_where_distortion_meets_noise_matches_a_brute_force_grid() {
    // HD3 wants g_m·R_E up, noise wants R_E down and current up: the least current is where
    // the two lines cross (a kink in the best margin).
    let budget = Budget {
        hd3_max_dbc: -60.0,
        noise_max_v_rthz: Some(4e-9),
        gain_min_db: 6.0,
        guard_band_db: 0.5,
        temperatures_c: vec![27.0],
    };
    let (currents, resistances) = ((1e-4, 5e-3), (0.0, 2e3));
    let report = sized_plan(&budget, currents, resistances)
        .evaluate()
        .unwrap();
    let design = &report.verdict.recommended.as_ref().unwrap().stages[0];
    let (grid_current, grid_resistance) = budget.least_tail_current(currents, resistances);
    // The grid's least holding current is at most 0.1 % above the true least one.
    let error = design.tail_current_a / grid_current - 1.0;
    eprintln!(
        "least current: tool {:.6e} A at {:.2} Ω, grid {:.6e} A at {:.2} Ω ({:+.3} %)",
        design.tail_current_a,
        design.emitter_resistance_ohm,
        grid_current,
        grid_resistance,
        100.0 * error
    );
    assert!(
        error.abs() < 0.01,
        "tool {} A at {} Ω, brute-force grid {} A at {} Ω ({:+.3} %)",
        design.tail_current_a,
        design.emitter_resistance_ohm,
        grid_current,
        grid_resistance,
        100.0 * error
    );
    // The recommended design meets every line by the guard band in its own full evaluation,
    // and the library agrees it holds.
    assert!(report.met());
    for line in report.budget.iter().filter(|b| b.stage == "pair@sized") {
        assert!(
            line.margin.unwrap() >= budget.guard_band_db - 1e-6,
            "{line:?}"
        );
    }
    assert!(budget.holds(
        design.tail_current_a * (1.0 + 1e-9),
        design.emitter_resistance_ohm
    ));
    // Both lines bind at the answer (within 0.1 dB of the guard band).
    for metric in ["hd3", "input_noise"] {
        let margin = report
            .budget
            .iter()
            .find(|b| b.stage == "pair@sized" && b.metric == metric)
            .unwrap()
            .margin
            .unwrap();
        assert!(margin - budget.guard_band_db < 0.1, "{metric}: {margin}");
    }
}

#[test]
fn least_current_where_distortion_meets_gain_at_two_temperatures_matches_a_brute_force_grid() {
    // Without a noise line, gain R_L/(R_E + 2φT/I) caps the degeneration (common practice),
    // and the hot end needs the most current.
    let budget = Budget {
        hd3_max_dbc: -70.0,
        noise_max_v_rthz: None,
        gain_min_db: 12.0,
        guard_band_db: 1.0,
        temperatures_c: vec![-20.0, 85.0],
    };
    let (currents, resistances) = ((2e-4, 4e-3), (0.0, 1.5e3));
    let report = sized_plan(&budget, currents, resistances)
        .evaluate()
        .unwrap();
    let design = &report.verdict.recommended.as_ref().unwrap().stages[0];
    let (grid_current, grid_resistance) = budget.least_tail_current(currents, resistances);
    let error = design.tail_current_a / grid_current - 1.0;
    eprintln!(
        "least current, two temperatures: tool {:.6e} A at {:.2} Ω, grid {:.6e} A at {:.2} Ω ({:+.3} %)",
        design.tail_current_a,
        design.emitter_resistance_ohm,
        grid_current,
        grid_resistance,
        100.0 * error
    );
    assert!(
        error.abs() < 0.01,
        "tool {} A, brute-force grid {} A ({:+.3} %)",
        design.tail_current_a,
        grid_current,
        100.0 * error
    );
    assert!(report.met());
    let region = &report.sizing_region[0];
    assert_eq!(region.minimise, "tail_current");
    // Each edge of the map names a line: below the usable R_E, HD3; above it, gain.
    let edges: Vec<(&str, &str)> = region
        .rows
        .iter()
        .flat_map(|row| &row.spans)
        .filter_map(|s| Some((s.below.as_deref()?, s.above.as_deref()?)))
        .collect();
    assert!(!edges.is_empty());
    assert!(
        edges
            .iter()
            .all(|&(below, above)| below == "hd3" && above == "gain"),
        "{edges:?}"
    );
}

#[test]
fn the_plan_keys_size_the_current_and_the_report_carries_it() {
    let dir = tempfile::tempdir().unwrap();
    let plan = dir.path().join("plan.yaml");
    std::fs::write(
        &plan,
        "name: keys\nstages:\n  - {name: s, tail_current: 1 mA, load_resistance: 2k, supply: 5 V}\n\
         drive: {amplitudes: [10 mV, 100 mV]}\n\
         budget:\n  - {metric: hd3, at: 100 mV, max: -60}\n  - {metric: input_noise, max: 4 nV}\n\
         sizing:\n  emitter_resistance: {from: 0, to: 2k}\n  tail_current: {from: 0.1 mA, to: 5 mA}\n  minimise: tail_current\n  guard_band_db: 1.0\n",
    )
    .unwrap();
    let out = dir.path().join("o");
    let assert = Command::cargo_bin("linbudget")
        .unwrap()
        .args([
            "run",
            plan.to_str().unwrap(),
            "--out",
            out.to_str().unwrap(),
            "--json",
        ])
        .assert()
        .code(0);
    let report: Report = serde_json::from_slice(&assert.get_output().stdout).unwrap();
    let stage = &report.verdict.recommended.as_ref().unwrap().stages[0];
    assert!(stage.tail_current_a > 1e-4 && stage.tail_current_a < 5e-3);
    assert_eq!(stage.planned_tail_current_a, 1e-3);
    let sized = report.stages.iter().find(|s| s.stage == "s@sized").unwrap();
    assert_eq!(sized.derived_from.as_deref(), Some("s"));
    assert_eq!(report.sizing[0].tail_current_a, Some(stage.tail_current_a));
    for stem in ["sizing-region-s", "sizing-pareto-s"] {
        for ext in ["svg", "png"] {
            assert!(
                out.join("keys").join(format!("{stem}.{ext}")).exists(),
                "{stem}.{ext}"
            );
        }
    }
}

//! The plan's cross-field rules, one test each: a plan that breaks the rule is refused with the
//! key path, the line and column of the offending value, what is wrong and what is accepted.
//! (The rules are the contract's and specs/README.md's; the messages are the project's own.)

use linbudget::{Plan, PlanError};

const STAGE: &str = "  - {name: a, tail_current: 1 mA, load_resistance: 2k}\n";

fn plan(rest: &str) -> String {
    format!("name: rules\nstages:\n{STAGE}{rest}")
}

fn refused(text: &str) -> PlanError {
    match Plan::from_yaml(text, "rules.yaml") {
        Ok(_) => panic!("accepted a plan that breaks a rule:\n{text}"),
        Err(err) => err,
    }
}

/// Asserts the error's key path, line, and that its problem and accepted texts say `problem`
/// and `accepted`.
fn assert_refusal(err: &PlanError, key_path: &str, line: u64, problem: &str, accepted: &str) {
    assert_eq!(err.key_path, key_path, "{err}");
    assert_eq!(err.line, line, "{err}");
    assert!(err.problem.contains(problem), "problem: {err}");
    assert!(err.accepted.contains(accepted), "accepted: {err}");
    assert_eq!(err.file, "rules.yaml");
    let shown = err.to_string();
    assert!(
        shown.starts_with(&format!("rules.yaml:{line}:")),
        "the message starts with file:line:column: {shown}"
    );
}

#[test]
fn an_im3_line_needs_two_tone_drive() {
    let err = refused(&plan(
        "drive: {amplitudes: [10 mV]}\nbudget:\n  - {metric: im3, at: 10 mV, max: -60}\n",
    ));
    assert_refusal(
        &err,
        "budget[0].metric",
        6,
        "an im3 line needs two-tone drive",
        "drive.two_tone_spacing",
    );
}

#[test]
fn at_applies_only_to_amplitude_metrics() {
    let err = refused(&plan(
        "drive: {amplitudes: [10 mV]}\nbudget:\n  - {metric: iip3, at: 10 mV, min: 300 mV}\n",
    ));
    assert_refusal(
        &err,
        "budget[0].at",
        6,
        "`at` does not apply to iip3",
        "`at` only on hdN, thd, im3 and collector_base_margin lines",
    );
}

#[test]
fn a_collector_base_margin_line_takes_a_minimum_only() {
    let err = refused(&plan(
        "drive: {amplitudes: [10 mV]}\nbudget:\n  - {metric: collector_base_margin, at: 10 mV, max: 300 mV}\n",
    ));
    assert_refusal(
        &err,
        "budget[0].max",
        6,
        "a collector_base_margin line sets the least reverse bias, with `min`",
        "{metric: collector_base_margin, at: 150 mV, min: 300 mV}",
    );
}

#[test]
fn a_budget_line_has_exactly_one_of_max_and_min() {
    for line in [
        "{metric: hd3, at: 10 mV}",
        "{metric: hd3, at: 10 mV, max: -60, min: -80}",
    ] {
        let err = refused(&plan(&format!(
            "drive: {{amplitudes: [10 mV]}}\nbudget:\n  - {line}\n"
        )));
        assert_refusal(
            &err,
            "budget[0]",
            6,
            "exactly one of `max` or `min`",
            "{metric: hd3, at: 100 mV, max: -60}",
        );
    }
}

#[test]
fn sizing_needs_budget_lines() {
    let err = refused(&plan(
        "drive: {amplitudes: [10 mV]}\nsizing:\n  emitter_resistance: {from: 0, to: 1k}\n",
    ));
    assert_refusal(
        &err,
        "sizing",
        6,
        "sizing needs budget lines to meet",
        "a `budget` list alongside `sizing`",
    );
}

#[test]
fn flicker_noise_is_not_integrated_from_zero_hertz() {
    let text = "name: rules\nstages:\n  - {name: a, tail_current: 1 mA, load_resistance: 2k, transistor: {beta: 100, flicker_coefficient: 1e-15}}\ndrive: {amplitudes: [10 mV]}\nnoise_band: {from: 0, to: 1 kHz}\n";
    let err = refused(text);
    assert_refusal(
        &err,
        "noise_band",
        5,
        "flicker noise integrated from 0 Hz is infinite",
        "noise_band.from above 0 Hz",
    );
    // Without flicker noise the same band is fine: white noise integrates from 0 Hz.
    let white = text.replace(", flicker_coefficient: 1e-15", "");
    assert!(Plan::from_yaml(&white, "rules.yaml").is_ok());
}

#[test]
fn a_noise_band_runs_upwards() {
    let err = refused(&plan(
        "drive: {amplitudes: [10 mV]}\nnoise_band: {from: 10 kHz, to: 1 kHz}\n",
    ));
    assert_refusal(
        &err,
        "noise_band.to",
        5,
        "the noise band is reversed: `from` is 10.0 kHz (line 5) but `to` is 1.00 kHz (line 5)",
        "`from` below `to`",
    );
}

#[test]
fn a_sizing_range_runs_upwards() {
    let err = refused(&plan(
        "drive: {amplitudes: [10 mV]}\nbudget:\n  - {metric: gain, min: 6}\nsizing:\n  emitter_resistance: {from: 2k, to: 1k}\n",
    ));
    assert_refusal(
        &err,
        "sizing.emitter_resistance.to",
        8,
        "the sizing range is reversed: `from` is 2.00 kΩ (line 8) but `to` is 1.00 kΩ (line 8)",
        "`from` below `to`",
    );
}

#[test]
fn a_sweep_runs_upwards() {
    let err = refused(&plan(
        "drive:\n  amplitudes: {from: 100 mV, to: 1 mV, points: 5}\n",
    ));
    assert_refusal(
        &err,
        "drive.amplitudes.to",
        5,
        "the sweep of amplitudes is reversed: `from` is 100 mV (line 5) but `to` is 1.00 mV (line 5)",
        "`from` below `to`",
    );
}

#[test]
fn stage_names_are_unique() {
    let text = format!(
        "name: rules\nstages:\n{STAGE}  - {{name: a, tail_current: 2 mA, load_resistance: 1k}}\ndrive: {{amplitudes: [10 mV]}}\n"
    );
    let err = refused(&text);
    assert_refusal(
        &err,
        "stages[1]",
        4,
        "stage name `a` is used twice: stages[0] (line 3) and stages[1] (line 4)",
        "a unique name for each stage",
    );
}

#[test]
fn corner_names_are_unique() {
    let err = refused(&plan(
        "drive: {amplitudes: [10 mV]}\ncorners:\n  - {name: slow, beta: -30%}\n  - {name: slow, beta: +30%}\n",
    ));
    assert_refusal(
        &err,
        "corners[1].name",
        7,
        "corner name `slow` is used twice",
        "a unique name for each corner",
    );
}

#[test]
fn a_harmonic_line_stays_within_the_analysed_orders() {
    let err = refused(&plan(
        "drive: {amplitudes: [10 mV], thd_harmonics: 12}\nbudget:\n  - {metric: hd15, at: 10 mV, max: -90}\n",
    ));
    assert_refusal(
        &err,
        "budget[0].metric",
        6,
        "hd15 is above the analysed orders",
        "hd2 to hd12 (raise drive.thd_harmonics for more)",
    );
    // Raising thd_harmonics admits it.
    let raised = plan(
        "drive: {amplitudes: [10 mV], thd_harmonics: 15}\nbudget:\n  - {metric: hd15, at: 10 mV, max: -90}\n",
    );
    assert!(Plan::from_yaml(&raised, "rules.yaml").is_ok());
}

#[test]
fn a_tail_law_keeps_the_current_positive_at_every_plan_temperature() {
    let text = "name: rules\ntemperatures_c: [27, 300]\nstages:\n  - name: a\n    tail_current: 1 mA\n    load_resistance: 2k\n    tail_current_law: {temperature_coefficient: -0.005}\ndrive: {amplitudes: [10 mV]}\n";
    let err = refused(text);
    assert_refusal(
        &err,
        "stages[0].tail_current_law",
        7,
        "the tail current would be",
        "keeps the tail current positive at every plan temperature",
    );
    assert!(err.problem.contains("at 300 °C"), "{err}");
}

#[test]
fn a_budget_limit_is_in_the_metric_s_unit() {
    // dB lines take plain numbers; a volt line refuses a dB figure and the reverse.
    let err = refused(&plan(
        "drive: {amplitudes: [10 mV]}\nbudget:\n  - {metric: iip3, min: 20 dB}\n",
    ));
    assert_eq!(err.key_path, "budget[0].min");
    let err = refused(&plan(
        "drive: {amplitudes: [10 mV]}\nbudget:\n  - {metric: hd3, at: 10 mV, max: 10 mV}\n",
    ));
    assert_eq!(err.key_path, "budget[0].max");
}

#[test]
fn a_distortion_limit_is_a_negative_dbc_maximum() {
    // dBc counts down from the fundamental: a positive maximum would allow a product above it.
    let err = refused(&plan(
        "drive: {amplitudes: [10 mV]}\nbudget:\n  - {metric: hd3, at: 10 mV, max: 40}\n",
    ));
    assert_refusal(
        &err,
        "budget[0].max",
        6,
        "a limit of 40 dBc would allow hd3 above the fundamental",
        "a negative dBc figure",
    );
    // A minimum on a distortion product is refused too, with the form that is meant.
    let err = refused(&plan(
        "drive: {amplitudes: [10 mV]}\nbudget:\n  - {metric: thd, at: 10 mV, min: 60}\n",
    ));
    assert_refusal(
        &err,
        "budget[0].min",
        6,
        "thd is a level relative to the fundamental",
        "{metric: thd, max: -60}",
    );
    // 0 dBc and below are accepted; a gain line keeps positive limits.
    assert!(Plan::from_yaml(
        &plan("drive: {amplitudes: [10 mV]}\nbudget:\n  - {metric: hd3, at: 10 mV, max: 0}\n  - {metric: gain, min: 40}\n"),
        "rules.yaml"
    )
    .is_ok());
}

#[test]
fn a_yield_line_needs_monte_carlo_and_takes_a_minimum_fraction() {
    let err = refused(&plan(
        "drive: {amplitudes: [10 mV]}\nbudget:\n  - {metric: yield, min: 99%}\n",
    ));
    assert_refusal(
        &err,
        "budget[0].metric",
        6,
        "a yield line needs a Monte Carlo population",
        "monte_carlo",
    );
    let with_runs = "drive: {amplitudes: [10 mV]}\nmonte_carlo: {runs: 10}\nbudget:\n";
    let err = refused(&plan(&format!(
        "{with_runs}  - {{metric: yield, max: 1%}}\n"
    )));
    assert_refusal(
        &err,
        "budget[0].max",
        7,
        "takes `min`",
        "{metric: yield, min: 99%}",
    );
    let err = refused(&plan(&format!(
        "{with_runs}  - {{metric: yield, min: 150%}}\n"
    )));
    assert_refusal(&err, "budget[0].min", 7, "is not a yield", "at most 1");
    let plan = Plan::from_yaml(
        &plan(&format!("{with_runs}  - {{metric: yield, min: 99%}}\n")),
        "rules.yaml",
    )
    .unwrap();
    assert_eq!(plan.budget[0].limit, linbudget::Limit::Min(0.99));
}

#[test]
fn values_no_bipolar_stage_can_have_are_refused_with_the_range() {
    let stage = |keys: &str| {
        format!("name: rules\nstages:\n  - {{name: a, {keys}}}\ndrive: {{amplitudes: [10 mV]}}\n")
    };
    let err = refused(&stage("tail_current: 1 MA, load_resistance: 2k"));
    assert_refusal(
        &err,
        "stages[0].tail_current",
        3,
        "1e6 A is out of range",
        "from 1.00 pA to 1.00 A",
    );
    let err = refused(&stage("tail_current: 1 mA, load_resistance: 1 mohm"));
    assert_refusal(
        &err,
        "stages[0].load_resistance",
        3,
        "is out of range",
        "from 1.00 Ω to 100 MΩ",
    );
    let err = refused(&format!(
        "temperatures_c: [27, 600]\n{}",
        stage("tail_current: 1 mA, load_resistance: 2k")
    ));
    assert_refusal(
        &err,
        "temperatures_c[1]",
        1,
        "600 °C is outside the temperatures the device model supports",
        "from -200 to 400 °C",
    );
}

#[test]
fn unusual_but_possible_values_are_accepted_with_a_caution() {
    let text = "name: rules\ntemperatures_c: [27, 200]\nstages:\n  - {name: a, tail_current: 1 mA, load_resistance: 2k, supply: 60 V}\ndrive: {amplitudes: [10 mV]}\n";
    let plan = Plan::from_yaml(text, "rules.yaml").unwrap();
    let paths: Vec<&str> = plan.cautions.iter().map(|c| c.key_path.as_str()).collect();
    assert_eq!(paths, ["temperatures_c[1]", "stages[0].supply"]);
    let supply = &plan.cautions[1];
    assert_eq!(supply.location, "rules.yaml:4:64");
    assert_eq!(supply.usual, (1.5, 40.0));
}

#[test]
fn a_guard_band_is_a_non_negative_number_of_decibels() {
    let sizing = "drive: {amplitudes: [10 mV]}\nbudget:\n  - {metric: gain, min: 6}\nsizing:\n  emitter_resistance: {from: 0, to: 1k}\n";
    let err = refused(&plan(&format!("{sizing}  guard_band_db: -1\n")));
    assert_refusal(
        &err,
        "sizing.guard_band_db",
        9,
        "is out of range",
        "from 0 dB to 40.0 dB",
    );
    let plan = Plan::from_yaml(
        &plan(&format!("{sizing}  guard_band_db: 1.5 dB\n")),
        "rules.yaml",
    )
    .unwrap();
    assert_eq!(plan.sizing.unwrap().guard_band_db, 1.5);
}

fn one_stage(stage: &str) -> String {
    format!("name: rules\nstages:\n{stage}drive: {{amplitudes: [10 mV]}}\n")
}

#[test]
fn a_multi_tanh_stage_needs_its_cell() {
    let err = refused(&one_stage(
        "  - {name: a, tail_current: 1 mA, load_resistance: 2k, topology: multi_tanh}\n",
    ));
    assert_refusal(
        &err,
        "stages[0].multi_tanh",
        3,
        "required key `multi_tanh`",
        "doublet",
    );
}

#[test]
fn an_unknown_topology_is_named_with_the_closest_one() {
    let err = refused(&one_stage(
        "  - {name: a, tail_current: 1 mA, load_resistance: 2k, topology: split_tale}\n",
    ));
    assert_refusal(
        &err,
        "stages[0].topology",
        3,
        "did you mean `split_tail`",
        "multi_tanh",
    );
}

#[test]
fn a_cell_is_only_for_a_multi_tanh_stage() {
    let err = refused(&one_stage(
        "  - {name: a, tail_current: 1 mA, load_resistance: 2k, multi_tanh: {form: doublet, area_ratio: 3}}\n",
    ));
    assert_refusal(
        &err,
        "stages[0].multi_tanh",
        3,
        "topology is emitter_resistors",
        "topology: multi_tanh",
    );
}

#[test]
fn a_doublet_has_no_centre_pair_and_listed_fractions_add_up_to_one() {
    let err = refused(&one_stage(
        "  - {name: a, tail_current: 1 mA, load_resistance: 2k, topology: multi_tanh,\n     multi_tanh: {form: doublet, area_ratio: 3, centre_fraction: 20%}}\n",
    ));
    assert_refusal(
        &err,
        "stages[0].multi_tanh.centre_fraction",
        4,
        "no centre pair",
        "form: triplet",
    );
    let err = refused(&one_stage(
        "  - {name: a, tail_current: 1 mA, load_resistance: 2k, topology: multi_tanh,\n     multi_tanh: {pairs: [{area_p: 3, tail_fraction: 0.5}, {area_m: 3, tail_fraction: 0.4}]}}\n",
    ));
    assert_refusal(
        &err,
        "stages[0].multi_tanh.pairs",
        4,
        "add up to 0.9",
        "adding up to 1",
    );
}

#[test]
fn a_split_tail_refuses_what_the_engines_do_not_solve() {
    let err = refused(&one_stage(
        "  - {name: a, tail_current: 1 mA, load_resistance: 2k, topology: split_tail, tail_capacitance: 1p}\n",
    ));
    assert_refusal(
        &err,
        "stages[0].tail_capacitance",
        3,
        "split tail",
        "tail_capacitance 0",
    );
}

#[test]
fn a_comparison_names_what_is_equal() {
    let err = refused(&plan(
        "drive: {amplitudes: [10 mV]}\ncomparison: {equal: power}\n",
    ));
    assert_refusal(
        &err,
        "comparison.equal",
        5,
        "cannot compare at equal `power`",
        "input_noise",
    );
}

#[test]
fn sizing_names_at_least_one_variable() {
    let err = refused(&plan(
        "drive: {amplitudes: [10 mV]}\nbudget:\n  - {metric: gain, min: 6}\nsizing:\n  guard_band_db: 1\n",
    ));
    assert_refusal(
        &err,
        "sizing",
        8,
        "sizing names no variable to choose",
        "`emitter_resistance` or `tail_current`",
    );
}

#[test]
fn the_variable_to_minimise_is_one_sizing_chooses() {
    let err = refused(&plan(
        "drive: {amplitudes: [10 mV]}\nbudget:\n  - {metric: gain, min: 6}\nsizing:\n  emitter_resistance: {from: 0, to: 1k}\n  minimise: tail_current\n",
    ));
    assert_refusal(
        &err,
        "sizing.minimise",
        9,
        "`minimise: tail_current` needs `tail_current` among the sizing variables",
        "`emitter_resistance`",
    );
    let err = refused(&plan(
        "drive: {amplitudes: [10 mV]}\nbudget:\n  - {metric: gain, min: 6}\nsizing:\n  tail_current: {from: 0.1 mA, to: 2 mA}\n  minimise: power\n",
    ));
    assert_refusal(
        &err,
        "sizing.minimise",
        9,
        "`power` is not a sizing variable",
        "`tail_current`",
    );
}

#[test]
fn a_tail_current_range_is_positive_and_runs_upwards() {
    let err = refused(&plan(
        "drive: {amplitudes: [10 mV]}\nbudget:\n  - {metric: gain, min: 6}\nsizing:\n  tail_current: {from: 2 mA, to: 1 mA}\n",
    ));
    assert_refusal(
        &err,
        "sizing.tail_current.to",
        8,
        "the tail-current sizing range is reversed",
        "`from` below `to`",
    );
    let err = refused(&plan(
        "drive: {amplitudes: [10 mV]}\nbudget:\n  - {metric: gain, min: 6}\nsizing:\n  tail_current: {from: 0, to: 1 mA}\n",
    ));
    assert_eq!(err.key_path, "sizing.tail_current.from", "{err}");
    let err = refused(&plan(
        "drive: {amplitudes: [10 mV]}\nbudget:\n  - {metric: gain, min: 6}\nsizing:\n  tail_current: {from: 1 kΩ, to: 2 kΩ}\n",
    ));
    assert_eq!(err.key_path, "sizing.tail_current.from", "{err}");
}

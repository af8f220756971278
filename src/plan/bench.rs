//! Bench data in a plan: `measurements` (CSV files of measured sweeps, read here — the plan
//! reader is the only place input files are read) and `fit` (which stage parameters a fit
//! may move, within which bounds, against which figures).
//!
//! A bench file is CSV with a header row. Columns (the unit is in the name, and a cell may
//! also carry the plan's unit strings with SI prefixes, e.g. `100 mV`): `temperature_c`,
//! `frequency_hz`, `amplitude_v` (peak differential per tone) are required; any of
//! `gain_db`, `hd2_dbc` … `hd9_dbc`, `thd_dbc`, `im3_dbc`, `im2_dbc`, `fundamental_v`,
//! `offset_v` give the measured figures (an empty cell: not measured); `corner` (a process
//! corner of the plan) and `die` (a free label) are optional. Lines starting with `#` are
//! comments. Every error names the file, the row and the column.

use super::reader::{closest, At, Range};
use super::tree::NodeValue;
use crate::error::PlanError;
use crate::model::corner::{Corner, TYPICAL};
use crate::model::measurement::{
    fitted_name, BenchFigure, BenchPoint, FitParameter, FitSettings, Measurements, StageParameter,
};
use crate::model::stage::Stage;
use crate::units::{parse_quantity, Unit};
use std::path::Path;

/// Largest bench file read, bytes.
pub const MAX_BENCH_BYTES: u64 = 16 * 1024 * 1024;
/// Most data rows a bench file may hold.
pub const MAX_BENCH_ROWS: usize = 100_000;

const REQUIRED_COLUMNS: [&str; 3] = ["temperature_c", "frequency_hz", "amplitude_v"];
const LABEL_COLUMNS: [&str; 2] = ["corner", "die"];

/// Every column a bench file may have, for messages.
fn column_names() -> Vec<String> {
    REQUIRED_COLUMNS
        .iter()
        .map(|c| c.to_string())
        .chain(BenchFigure::all().into_iter().map(BenchFigure::column))
        .chain(LABEL_COLUMNS.iter().map(|c| c.to_string()))
        .collect()
}

fn accepted_columns() -> String {
    "a header row with temperature_c, frequency_hz, amplitude_v and one or more of gain_db, \
     hd2_dbc … hd9_dbc, thd_dbc, im3_dbc, im2_dbc, fundamental_v, offset_v (optional: corner, die)"
        .into()
}

/// What a column holds.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Column {
    Temperature,
    Frequency,
    Amplitude,
    Figure(BenchFigure),
    Corner,
    Die,
}

impl Column {
    fn of(name: &str) -> Option<Column> {
        Some(match name {
            "temperature_c" => Column::Temperature,
            "frequency_hz" => Column::Frequency,
            "amplitude_v" => Column::Amplitude,
            "corner" => Column::Corner,
            "die" => Column::Die,
            other => Column::Figure(
                BenchFigure::all()
                    .into_iter()
                    .find(|f| f.column() == other)?,
            ),
        })
    }

    /// The unit and range of the column's quantities.
    fn quantity(self) -> Option<(Unit, Range)> {
        Some(match self {
            Column::Temperature => (Unit::Celsius, Range::Between(-273.15, 1000.0)),
            Column::Frequency => (Unit::Hertz, Range::Positive),
            Column::Amplitude | Column::Figure(BenchFigure::Fundamental) => {
                (Unit::Volt, Range::Positive)
            }
            Column::Figure(BenchFigure::Offset) => (Unit::Volt, Range::Finite),
            Column::Figure(_) => (Unit::Decibel, Range::Finite),
            Column::Corner | Column::Die => return None,
        })
    }
}

/// Reads the plan's `measurements` list: each entry names a stage and a CSV file (relative to
/// the plan's folder).
pub fn read_measurements(
    at: &At,
    plan_dir: &Path,
    stages: &[Stage],
    corners: &[Corner],
) -> Result<Vec<Measurements>, PlanError> {
    let mut all = Vec::new();
    for item in at.seq("bench files, e.g. [{stage: pair, file: bench.csv}]")? {
        let map = item.map(&["stage", "file"])?;
        let stage_at = map.required("stage", "the name of a plan stage")?;
        let names: Vec<&str> = stages.iter().map(|s| s.name.as_str()).collect();
        let stage = stage_at.text("the name of a plan stage")?;
        if !names.contains(&stage) {
            return Err(stage_at.error(
                format!("no stage is named `{stage}`"),
                format!("one of the plan's stages: {}", names.join(", ")),
            ));
        }
        let file_at = map.required("file", "a CSV file, relative to the plan's folder")?;
        let file = file_at.text("a CSV file, relative to the plan's folder")?;
        let path = plan_dir.join(file);
        let text = read_file(&path).map_err(|why| {
            file_at.error(
                format!("cannot read bench file {}: {why}", path.display()),
                "a readable CSV file of at most 16 MiB, relative to the plan's folder",
            )
        })?;
        let shown = path.display().to_string();
        let points = read_bench_csv(&text, corners).map_err(|e| e.in_file(&shown, &text))?;
        all.push(Measurements {
            stage: stage.to_owned(),
            file: file.to_owned(),
            points,
        });
    }
    Ok(all)
}

fn read_file(path: &Path) -> Result<String, String> {
    let meta = std::fs::metadata(path).map_err(|e| e.to_string())?;
    if meta.len() > MAX_BENCH_BYTES {
        return Err(format!("it is {} bytes", meta.len()));
    }
    std::fs::read_to_string(path).map_err(|e| e.to_string())
}

/// Where a cell sits, for an error: `row 5 (data row 4), column amplitude_v`.
fn cell_error(
    text: &str,
    line: u64,
    data_row: Option<usize>,
    field: Option<(usize, &str)>,
    problem: impl Into<String>,
    accepted: impl Into<String>,
) -> PlanError {
    let row = match data_row {
        Some(n) => format!("row {line} (data row {n})"),
        None => format!("row {line} (header)"),
    };
    let (place, column) = match field {
        Some((index, name)) => (
            format!("{row}, column {name}"),
            cell_column(text, line, index),
        ),
        None => (row, 0),
    };
    PlanError::at(line, column, &place, problem, accepted)
}

/// The 1-based character column where field `index` starts on `line` (0 when the line has
/// quotes and the position cannot be told without parsing).
fn cell_column(text: &str, line: u64, index: usize) -> u64 {
    let Some(source) = text.lines().nth(line.saturating_sub(1) as usize) else {
        return 0;
    };
    if source.contains('"') {
        return 0;
    }
    let mut column = 1;
    for (i, cell) in source.split(',').enumerate() {
        if i == index {
            let lead = cell.chars().take_while(|c| c.is_whitespace()).count();
            return (column + lead) as u64;
        }
        column += cell.chars().count() + 1;
    }
    0
}

/// The line of the header: the first line that is neither blank nor a comment.
fn header_line(text: &str) -> u64 {
    text.lines()
        .position(|l| !l.trim().is_empty() && !l.trim_start().starts_with('#'))
        .map_or(1, |i| i as u64 + 1)
}

/// Reads the text of a bench CSV file into measured points.
pub fn read_bench_csv(text: &str, corners: &[Corner]) -> Result<Vec<BenchPoint>, PlanError> {
    let mut reader = csv::ReaderBuilder::new()
        .has_headers(true)
        .trim(csv::Trim::All)
        .comment(Some(b'#'))
        .from_reader(text.as_bytes());
    let header_at = header_line(text);
    let headers = reader
        .headers()
        .map_err(|e| csv_error(text, &e, header_at))?
        .clone();
    if headers.iter().all(|h| h.is_empty()) {
        return Err(cell_error(
            text,
            header_at,
            None,
            None,
            "the file has no header row",
            accepted_columns(),
        ));
    }
    let names = column_names();
    let name_refs: Vec<&str> = names.iter().map(String::as_str).collect();
    let mut columns = Vec::with_capacity(headers.len());
    for (index, name) in headers.iter().enumerate() {
        let Some(column) = Column::of(name) else {
            let hint = closest(name, &name_refs)
                .map(|near| format!(" (did you mean `{near}`?)"))
                .unwrap_or_default();
            return Err(cell_error(
                text,
                header_at,
                None,
                Some((index, name)),
                format!("unknown column `{name}`{hint}; the unit is part of the name (values may carry prefixes, e.g. \"100 mV\" in amplitude_v)"),
                format!("columns: {}", names.join(", ")),
            ));
        };
        if columns.contains(&column) {
            return Err(cell_error(
                text,
                header_at,
                None,
                Some((index, name)),
                format!("column `{name}` is given twice"),
                "each column once",
            ));
        }
        columns.push(column);
    }
    for required in REQUIRED_COLUMNS {
        if !headers.iter().any(|h| h == required) {
            return Err(cell_error(
                text,
                header_at,
                None,
                None,
                format!("required column {required} is missing"),
                accepted_columns(),
            ));
        }
    }
    if !columns.iter().any(|c| matches!(c, Column::Figure(_))) {
        return Err(cell_error(
            text,
            header_at,
            None,
            None,
            "the file has no column of a measured figure",
            accepted_columns(),
        ));
    }
    let corner_names: Vec<&str> = corners.iter().map(|c| c.name.as_str()).collect();

    let mut points = Vec::new();
    for (record_index, record) in reader.records().enumerate() {
        let record = record.map_err(|e| csv_error(text, &e, header_at))?;
        let line = record.position().map_or(0, |p| p.line());
        let data_row = record_index + 1;
        if data_row > MAX_BENCH_ROWS {
            return Err(cell_error(
                text,
                line,
                Some(data_row),
                None,
                format!("the file has more than {MAX_BENCH_ROWS} data rows"),
                format!("at most {MAX_BENCH_ROWS} measured points per file"),
            ));
        }
        let mut point = BenchPoint {
            row: line,
            temperature_c: f64::NAN,
            frequency_hz: f64::NAN,
            amplitude_v: f64::NAN,
            corner: None,
            die: None,
            values: Vec::new(),
        };
        for (index, (cell, column)) in record.iter().zip(&columns).enumerate() {
            let name = &headers[index];
            let fail = |problem: String, accepted: String| {
                cell_error(
                    text,
                    line,
                    Some(data_row),
                    Some((index, name)),
                    problem,
                    accepted,
                )
            };
            match column {
                Column::Corner => {
                    if cell.is_empty() || cell == TYPICAL {
                        continue;
                    }
                    if !corner_names.contains(&cell) {
                        return Err(fail(
                            format!("`{cell}` is not a process corner of the plan"),
                            format!(
                                "empty (typical) or one of the plan's corners: {}",
                                corner_names.join(", ")
                            ),
                        ));
                    }
                    point.corner = Some(cell.to_owned());
                }
                Column::Die => {
                    if !cell.is_empty() {
                        point.die = Some(cell.to_owned());
                    }
                }
                _ => {
                    let Some((unit, range)) = column.quantity() else {
                        continue;
                    };
                    if cell.is_empty() {
                        if matches!(column, Column::Figure(_)) {
                            continue;
                        }
                        return Err(fail("the cell is empty".into(), unit.describe().to_owned()));
                    }
                    let value = parse_quantity(cell, unit)
                        .map_err(|why| fail(why, unit.describe().to_owned()))?;
                    if !range.accepts(value) {
                        return Err(fail(
                            format!("{cell} is out of range"),
                            super::reader::accepted_phrase(unit, range),
                        ));
                    }
                    match column {
                        Column::Temperature => point.temperature_c = value,
                        Column::Frequency => point.frequency_hz = value,
                        Column::Amplitude => point.amplitude_v = value,
                        Column::Figure(figure) => point.values.push((*figure, value)),
                        Column::Corner | Column::Die => {}
                    }
                }
            }
        }
        points.push(point);
    }
    if points.is_empty() {
        return Err(cell_error(
            text,
            header_at,
            None,
            None,
            "the file has a header but no data rows",
            "one row per measured drive point below the header",
        ));
    }
    Ok(points)
}

/// A CSV syntax error (unequal row lengths, invalid UTF-8) located at its row.
fn csv_error(text: &str, error: &csv::Error, header_at: u64) -> PlanError {
    let line = error.position().map_or(header_at, |p| p.line());
    let problem = match error.kind() {
        csv::ErrorKind::UnequalLengths {
            expected_len, len, ..
        } => format!("the row has {len} cells where the header has {expected_len}"),
        _ => format!("the CSV cannot be read: {error}"),
    };
    let data_row = error
        .position()
        .map(|p| p.record() as usize)
        .filter(|r| *r > 0);
    cell_error(
        text,
        line,
        data_row,
        None,
        problem,
        "comma-separated cells, one per header column on every row",
    )
}

/// The unit and accepted range of a fittable stage key.
fn parameter_quantity(key: &str) -> (Unit, Range) {
    match key {
        "tail_current" | "transistor.saturation_current" => (Unit::Ampere, Range::Positive),
        "load_resistance" | "tail_resistance" => (Unit::Ohm, Range::Positive),
        "emitter_resistance" | "source_resistance" | "transistor.base_resistance" => {
            (Unit::Ohm, Range::NonNegative)
        }
        "load_capacitance"
        | "tail_capacitance"
        | "transistor.emitter_junction_capacitance"
        | "transistor.collector_junction_capacitance" => (Unit::Farad, Range::NonNegative),
        "transistor.beta" => (Unit::Number, Range::Positive),
        "transistor.early_voltage" => (Unit::Volt, Range::Positive),
        "transistor.transit_time" => (Unit::Second, Range::NonNegative),
        _ => (Unit::Ratio, Range::Between(-0.9, 9.0)),
    }
}

const FIT_KEYS: &[&str] = &["parameters", "metrics", "weight"];

/// Reads the plan's `fit` mapping.
pub fn read_fit(
    at: &At,
    measurements: &[Measurements],
    stages: &[Stage],
) -> Result<FitSettings, PlanError> {
    let map = at.map(FIT_KEYS)?;
    if measurements.is_empty() {
        return Err(at.error(
            "a fit needs bench data",
            "a `measurements` list alongside `fit`",
        ));
    }
    let keys: Vec<&str> = StageParameter::keys().collect();
    let parameters_at = map.required("parameters", "{emitter_resistance: {from: 0, to: 1k}}")?;
    parameters_at.map(&keys)?;
    let NodeValue::Map(entries) = &parameters_at.node.value else {
        return Err(parameters_at.error(
            "expected a mapping",
            "{emitter_resistance: {from: 0, to: 1k}}",
        ));
    };
    let mut parameters = Vec::new();
    for (key_node, value) in entries {
        let NodeValue::Text(key) = &key_node.value else {
            continue;
        };
        let bounds_at = At {
            node: value,
            path: format!("{}.{key}", parameters_at.path),
        };
        let (unit, range) = parameter_quantity(key);
        let bounds = bounds_at.map(&["from", "to"])?;
        let from = bounds.quantity("from", unit, range)?;
        let to = bounds.quantity("to", unit, range)?;
        if to <= from {
            return Err(bounds_at.error(
                "`to` must exceed `from`",
                "finite bounds with from < to, e.g. {from: 0, to: 1k}",
            ));
        }
        parameters.push(FitParameter {
            key: key.clone(),
            from,
            to,
        });
    }
    if parameters.is_empty() {
        return Err(parameters_at.error(
            "no parameter to fit",
            format!("one or more of: {}", keys.join(", ")),
        ));
    }

    let figure_names: Vec<String> = BenchFigure::all()
        .into_iter()
        .map(BenchFigure::name)
        .collect();
    let accepted_metrics = format!("a list of: {}", figure_names.join(", "));
    let metrics_at = map.required("metrics", &accepted_metrics)?;
    let mut metrics = Vec::new();
    for item in metrics_at.seq("figures, e.g. [hd3, gain]")? {
        let name = item.text(&accepted_metrics)?;
        let figure = BenchFigure::from_name(name).ok_or_else(|| {
            item.error(format!("unknown metric `{name}`"), accepted_metrics.clone())
        })?;
        if metrics.contains(&figure) {
            return Err(item.error(format!("`{name}` is listed twice"), "each metric once"));
        }
        metrics.push(figure);
    }
    if metrics.is_empty() {
        return Err(metrics_at.error("no metric to fit", accepted_metrics));
    }

    let mut weights = Vec::new();
    if let Some(weight_at) = map.get("weight") {
        let names: Vec<String> = metrics.iter().map(|m| m.name()).collect();
        let name_refs: Vec<&str> = names.iter().map(String::as_str).collect();
        let weight_map = weight_at.map(&name_refs)?;
        for figure in &metrics {
            if let Some(w) = weight_map.get(&figure.name()) {
                weights.push((*figure, w.quantity_where(Unit::Number, Range::Positive)?));
            }
        }
    }

    for stage in stages {
        let sets: Vec<&Measurements> = measurements
            .iter()
            .filter(|m| m.stage == stage.name)
            .collect();
        if sets.is_empty() {
            continue;
        }
        let residuals: usize = sets
            .iter()
            .flat_map(|set| &set.points)
            .map(|p| metrics.iter().filter(|m| p.value(**m).is_some()).count())
            .sum();
        if residuals <= parameters.len() {
            let files: Vec<&str> = sets.iter().map(|s| s.file.as_str()).collect();
            return Err(metrics_at.error(
                format!(
                    "the bench data of stage `{}` ({}) has {residuals} measured value(s) of these metrics for {} parameter(s)",
                    stage.name,
                    files.join(", "),
                    parameters.len()
                ),
                "more measured values of the fitted metrics than fitted parameters (columns such as hd3_dbc, gain_db)",
            ));
        }
        let twin = fitted_name(&stage.name);
        if stages.iter().any(|s| s.name == twin) {
            return Err(at.error(
                format!("the fitted stage would be named `{twin}`, which a plan stage already is"),
                "stage names that do not end in @fitted",
            ));
        }
    }
    Ok(FitSettings {
        parameters,
        metrics,
        weights,
    })
}

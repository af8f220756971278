//! Errors of the library: bad plans (with position and key path) and failed solves.

use std::fmt;
use std::path::PathBuf;

/// A plan that cannot be used, located in its file.
#[derive(Debug, Clone, PartialEq)]
pub struct PlanError {
    /// The plan file's name as given on the command line (empty when read from a string).
    pub file: String,
    /// 1-based line (0 when the YAML parser could not locate it).
    pub line: u64,
    /// 1-based column (0 when unknown).
    pub column: u64,
    /// Key path such as `stages[1].load_resistance` (empty for the whole document).
    pub key_path: String,
    /// What is wrong.
    pub problem: String,
    /// What would be accepted instead.
    pub accepted: String,
    /// The offending source line, for display.
    pub source_line: Option<String>,
}

impl PlanError {
    /// An error at a position and key path; the file is filled in by the loader.
    pub fn at(
        line: u64,
        column: u64,
        key_path: &str,
        problem: impl Into<String>,
        accepted: impl Into<String>,
    ) -> Self {
        PlanError {
            file: String::new(),
            line,
            column,
            key_path: key_path.to_owned(),
            problem: problem.into(),
            accepted: accepted.into(),
            source_line: None,
        }
    }

    /// Attaches the file name and the offending source line; an error already located in
    /// another file (a bench CSV named by the plan) keeps its own.
    pub fn in_file(mut self, file: &str, source: &str) -> Self {
        if !self.file.is_empty() {
            return self;
        }
        self.file = file.to_owned();
        if self.line > 0 {
            self.source_line =
                nth_line(source, self.line).map(|line| line.chars().take(200).collect());
        }
        self
    }
}

/// The `number`-th line (1-based) of `text`, where CR, LF and CR LF each end a line.
pub fn nth_line(text: &str, number: u64) -> Option<&str> {
    if number == 0 {
        return None;
    }
    let mut current = 1u64;
    let mut start = 0usize;
    let bytes = text.as_bytes();
    let mut i = 0;
    while i < bytes.len() {
        if bytes[i] == b'\r' || bytes[i] == b'\n' {
            if current == number {
                return Some(&text[start..i]);
            }
            if bytes[i] == b'\r' && bytes.get(i + 1) == Some(&b'\n') {
                i += 1;
            }
            current += 1;
            start = i + 1;
        }
        i += 1;
    }
    (current == number && start <= text.len()).then(|| &text[start..])
}

impl fmt::Display for PlanError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let file = if self.file.is_empty() {
            "<plan>"
        } else {
            &self.file
        };
        if self.line > 0 && self.column > 0 {
            write!(f, "{file}:{}:{}: ", self.line, self.column)?;
        } else if self.line > 0 {
            write!(f, "{file}:{}: ", self.line)?;
        } else {
            write!(f, "{file}: ")?;
        }
        if !self.key_path.is_empty() {
            write!(f, "{}: ", self.key_path)?;
        }
        write!(f, "{}", self.problem)?;
        if !self.accepted.is_empty() {
            write!(f, "\n  accepted: {}", self.accepted)?;
        }
        if let Some(source) = &self.source_line {
            let gutter = self.line.to_string();
            write!(f, "\n  {gutter} | {source}")?;
            if self.column > 0 && (self.column as usize) <= source.chars().count() + 1 {
                let pad = " ".repeat(gutter.len());
                let indent = " ".repeat((self.column - 1) as usize);
                write!(f, "\n  {pad} | {indent}^")?;
            }
        }
        Ok(())
    }
}

impl std::error::Error for PlanError {}

/// Everything that can go wrong in the library.
#[derive(Debug, thiserror::Error)]
pub enum Error {
    /// The plan file could not be read.
    #[error("cannot read plan {path}: {source}")]
    ReadPlan {
        /// The file.
        path: PathBuf,
        /// The I/O failure.
        source: std::io::Error,
    },
    /// The plan is malformed or physically invalid.
    #[error("{0}")]
    Plan(Box<PlanError>),
    /// A numerical solve failed; the message names the stage, temperature and drive point.
    #[error("solve failed for stage `{stage}` at {temperature_c} °C, {point}: {reason}")]
    Solve {
        /// Stage name.
        stage: String,
        /// Temperature, °C.
        temperature_c: f64,
        /// The drive point (amplitude, frequency, sample) in words.
        point: String,
        /// Why it failed.
        reason: String,
    },
    /// A stage could not be fitted to its bench data.
    #[error("fit of stage `{stage}` to its bench data: {reason}")]
    Fit {
        /// Stage name.
        stage: String,
        /// Why the fit failed.
        reason: String,
    },
    /// A value handed to the library is out of range.
    #[error("{name}: {problem}\n  accepted: {accepted}")]
    Argument {
        /// Which argument or field.
        name: String,
        /// What is wrong.
        problem: String,
        /// What would be accepted.
        accepted: String,
    },
    /// A figure that does not exist for this stage (an intercept without a small-signal
    /// region, a compression point beyond any input).
    #[error("stage `{stage}` at {temperature_c} °C: {figure} is not defined: {reason}")]
    NotDefined {
        /// Stage name.
        stage: String,
        /// Temperature, °C.
        temperature_c: f64,
        /// The figure asked for.
        figure: String,
        /// Why it does not exist.
        reason: String,
    },
    /// The output folder could not be prepared or written.
    #[error("cannot write output {path}: {reason}")]
    Output {
        /// The path concerned.
        path: PathBuf,
        /// What went wrong.
        reason: String,
    },
}

impl Error {
    /// A solver failure attributed to its stage and temperature.
    pub fn solve(stage: &str, temperature_c: f64, failure: SolveFailure) -> Error {
        Error::Solve {
            stage: stage.to_owned(),
            temperature_c,
            point: failure.point,
            reason: failure.reason,
        }
    }
}

impl From<PlanError> for Error {
    fn from(err: PlanError) -> Self {
        Error::Plan(Box::new(err))
    }
}

/// A solver failure before it is attributed to a stage and temperature.
#[derive(Debug, Clone, PartialEq)]
pub struct SolveFailure {
    /// The drive point in words, e.g. "v_d = 0.1 V".
    pub point: String,
    /// Why it failed.
    pub reason: String,
}

impl fmt::Display for SolveFailure {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}: {}", self.point, self.reason)
    }
}

impl std::error::Error for SolveFailure {}

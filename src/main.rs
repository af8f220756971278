//! The `linbudget` command: parse arguments, call the library, map the outcome to an exit status
//! (0 met, 1 not met, 2 bad input or a failed solve).

use clap::{CommandFactory, Parser, Subcommand};
use linbudget::run::{
    check_with_overrides, describe_run, parse_duration, phase_name, run, RunOptions, RunProgress,
    DEFAULT_MAX_WORK,
};
use linbudget::study::evaluate::{Phase, Progress};
use std::io::IsTerminal;
use std::path::PathBuf;
use std::process::ExitCode;

const RUN_EXAMPLES: &str = "Examples:
  linbudget run specs/sensor-front-end.yaml
  linbudget run specs/sensor-front-end.yaml --out results --json > report.json
  linbudget run specs/sonar-vga-sizing.yaml --quiet --no-figures
  linbudget run specs/sonar-vga-sizing.yaml --as-planned
  linbudget run specs/sensor-front-end.yaml --set stages[1].emitter_resistance=330 --set drive.frequencies=[1MHz]

Exit status: 0 the plan is met (with sizing: the recommended design meets every line; with
--as-planned: the stages as written do), 1 not met, 2 bad input or a failed solve (nothing
written).";

const COMPLETIONS_EXAMPLES: &str = "Examples:
  linbudget completions bash > ~/.local/share/bash-completion/completions/linbudget
  linbudget completions zsh > ~/.zfunc/_linbudget      # with fpath+=~/.zfunc in ~/.zshrc
  linbudget completions fish > ~/.config/fish/completions/linbudget.fish";

const CHECK_EXAMPLES: &str = "Examples:
  linbudget check specs/sensor-front-end.yaml
  linbudget check specs/sensor-front-end.yaml --set sizing.guard_band_db=1

Exit status: 0 valid, 2 invalid (the message names file, line, column and key path).";

/// Large-signal linearity budgets for bipolar differential input stages.
#[derive(Parser, Debug)]
#[command(name = "linbudget", version, about, long_about = None)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand, Debug)]
enum Command {
    /// Evaluate every stage, temperature, frequency and amplitude of a plan, check the budget,
    /// size degeneration when asked, and write OUT/<plan name>/.
    #[command(after_help = RUN_EXAMPLES)]
    Run {
        /// The plan (YAML).
        plan: PathBuf,
        /// Output folder; the report goes to OUT/<plan name>/.
        #[arg(long, default_value = "out")]
        out: PathBuf,
        /// Print the JSON report on standard output (and nothing else there).
        #[arg(long)]
        json: bool,
        /// No progress lines on standard error.
        #[arg(long, short)]
        quiet: bool,
        /// Largest estimated run time accepted (default 10min): a duration such as 90s,
        /// 10min, 1.5h or 2d, or plain seconds; raise it deliberately for a plan refused as
        /// too long.
        #[arg(long, value_name = "DURATION", default_value_t = DEFAULT_MAX_WORK, value_parser = parse_duration)]
        max_work: f64,
        /// Write the tables and reports without drawing figures (fast scripted sweeps).
        #[arg(long)]
        no_figures: bool,
        /// Verdict and exit status on the stages as written, not on the design sizing
        /// recommends (the report still shows both).
        #[arg(long)]
        as_planned: bool,
        /// Override one plan value before validation, e.g. stages[1].emitter_resistance=330
        /// or drive.frequencies=[1MHz] (repeatable; validated like the file's own values).
        #[arg(long = "set", value_name = "KEY.PATH=VALUE")]
        set: Vec<String>,
    },
    /// Validate a plan only; writes nothing.
    #[command(after_help = CHECK_EXAMPLES)]
    Check {
        /// The plan (YAML).
        plan: PathBuf,
        /// Largest estimated run time accepted (default 10min), e.g. 90s, 10min, 1.5h.
        #[arg(long, value_name = "DURATION", default_value_t = DEFAULT_MAX_WORK, value_parser = parse_duration)]
        max_work: f64,
        /// Override one plan value before validation (repeatable), as for `run`.
        #[arg(long = "set", value_name = "KEY.PATH=VALUE")]
        set: Vec<String>,
    },
    /// Print a completion script for a shell on standard output.
    #[command(after_help = COMPLETIONS_EXAMPLES)]
    Completions {
        /// The shell: bash, elvish, fish, powershell or zsh.
        shell: clap_complete::Shell,
    },
}

/// The status line on standard error: a spinner with what is being done, and for a counted
/// phase a bar with the fraction done and an estimate of the time left.
struct StatusLine {
    bar: indicatif::ProgressBar,
    phase: std::sync::Mutex<Option<Phase>>,
}

impl StatusLine {
    fn new(visible: bool) -> Self {
        let bar = if visible {
            let bar = indicatif::ProgressBar::with_draw_target(
                None,
                indicatif::ProgressDrawTarget::stderr(),
            );
            bar.set_style(Self::spinner_style());
            bar.enable_steady_tick(std::time::Duration::from_millis(120));
            bar
        } else {
            indicatif::ProgressBar::hidden()
        };
        StatusLine {
            bar,
            phase: std::sync::Mutex::new(None),
        }
    }

    fn spinner_style() -> indicatif::ProgressStyle {
        indicatif::ProgressStyle::with_template("{spinner} {elapsed:>3} {wide_msg}")
            .unwrap_or_else(|_| indicatif::ProgressStyle::default_spinner())
    }

    fn bar_style() -> indicatif::ProgressStyle {
        indicatif::ProgressStyle::with_template(
            "{spinner} {elapsed:>3} {msg:<17} [{bar:28}] {pos}/{len} ({percent} %) · about {eta} left",
        )
        .unwrap_or_else(|_| indicatif::ProgressStyle::default_bar())
        .progress_chars("=> ")
    }

    fn show(&self, event: RunProgress) {
        let mut current = self.phase.lock().unwrap_or_else(|p| p.into_inner());
        match event {
            RunProgress::Study(Progress::Step { phase, done, total }) => {
                if *current != Some(phase) {
                    *current = Some(phase);
                    self.bar.reset();
                    self.bar.set_style(Self::bar_style());
                    self.bar.set_message(phase_name(phase));
                }
                self.bar.set_length(total);
                self.bar.set_position(done);
            }
            other => {
                *current = None;
                self.bar.set_style(Self::spinner_style());
                self.bar.set_message(describe_run(other));
            }
        }
    }
}

fn main() -> ExitCode {
    let cli = match Cli::try_parse() {
        Ok(cli) => cli,
        Err(err) => {
            let _ = err.print();
            return if err.use_stderr() {
                ExitCode::from(2)
            } else {
                ExitCode::SUCCESS
            };
        }
    };
    match cli.command {
        Command::Completions { shell } => {
            let mut command = Cli::command();
            clap_complete::generate(shell, &mut command, "linbudget", &mut std::io::stdout());
            ExitCode::SUCCESS
        }
        Command::Check {
            plan,
            max_work,
            set,
        } => match check_with_overrides(&plan, &set, max_work) {
            Ok(p) => {
                for warning in linbudget::report::build::plan_warnings(&p) {
                    eprintln!("warning: {warning}");
                }
                let work = linbudget::study::workload::estimate(&p);
                eprintln!(
                    "{}: valid plan `{}` ({} stage(s)); estimated run time {} ({} of one core)",
                    plan.display(),
                    p.name,
                    p.stages.len(),
                    linbudget::study::workload::format_duration(work.wall_seconds),
                    linbudget::study::workload::format_duration(work.cpu_seconds),
                );
                ExitCode::SUCCESS
            }
            Err(err) => {
                eprintln!("error: {err}");
                ExitCode::from(2)
            }
        },
        Command::Run {
            plan,
            out,
            json,
            quiet,
            max_work,
            no_figures,
            as_planned,
            set,
        } => {
            let options = RunOptions {
                plan,
                out,
                json,
                quiet,
                max_work,
                figures: !no_figures,
                as_planned,
                overrides: set,
            };
            // Progress on standard error, only on a terminal and never with --quiet; standard
            // output stays reserved for --json.
            let status = StatusLine::new(!quiet && std::io::stderr().is_terminal());
            let outcome = run(&options, &|event| status.show(event));
            status.bar.finish_and_clear();
            match outcome {
                Ok(outcome) => {
                    for warning in &outcome.report.warnings {
                        eprintln!("warning: {warning}");
                    }
                    if json {
                        let mut stdout = std::io::stdout().lock();
                        let _ = linbudget::report::json::write_json(
                            &outcome.report,
                            std::io::BufWriter::new(&mut stdout),
                        );
                    }
                    eprintln!(
                        "{}: plan `{}` {} — report in {}",
                        options.plan.display(),
                        outcome.report.plan,
                        outcome.report.verdict.summary,
                        outcome.folder.display()
                    );
                    if outcome.report.met {
                        ExitCode::SUCCESS
                    } else {
                        ExitCode::from(1)
                    }
                }
                Err(err) => {
                    eprintln!("error: {err}");
                    ExitCode::from(2)
                }
            }
        }
    }
}

//! Every command and option, defined once (clap derive), and the one function that turns
//! parsed arguments into calls of `app` and an exit code. Nothing downstream sees raw arguments.

use std::io::IsTerminal;
use std::path::PathBuf;

use clap::{Parser, Subcommand};

use crate::app::check::check_with_data;
use crate::app::plan::plan;
use crate::app::run::run;
use crate::app::schema::{SchemaKind, schema_text};
use crate::app::{AppError, Exit, Log};
use crate::pipeline::cache::Cache;
use crate::pipeline::chain::Progress;
use crate::report::WriteOutcome;
use crate::spec::diagnostic::plural;
use crate::steps::StepKind;

#[derive(Debug, Parser)]
#[command(name = "construe", version, arg_required_else_help = true, about = "Latent-structure analysis of survey constructs from one declarative spec", long_about = None)]
pub struct Cli {
    #[command(subcommand)]
    pub command: Command,
    /// Trace each step on stderr with its timing (-v), or in detail (-vv); `CONSTRUE_LOG`
    /// (a tracing filter such as `construe=debug`) overrides
    #[arg(short, long, global = true, action = clap::ArgAction::Count)]
    pub verbose: u8,
}

impl Cli {
    /// The tracing filter: `CONSTRUE_LOG` if set, else warnings only, or construe's step spans
    /// and timings with `-v` (`info`) and `-vv` (`debug`).
    pub fn log_filter(&self) -> String {
        match std::env::var("CONSTRUE_LOG") {
            Ok(filter) if !filter.trim().is_empty() => filter,
            _ => match self.verbose {
                0 => "warn".into(),
                1 => "warn,construe=info".into(),
                _ => "warn,construe=debug".into(),
            },
        }
    }
}

#[derive(Debug, clap::Args)]
pub struct CacheArgs {
    /// Cache folder for step artifacts
    #[arg(long, env = "CONSTRUE_CACHE", default_value = "cache", value_name = "DIR")]
    pub cache: PathBuf,
    /// Compute every step, reading and writing no cache entries
    #[arg(long)]
    pub no_cache: bool,
}

impl CacheArgs {
    fn resolve(&self) -> Cache {
        if self.no_cache { Cache::disabled() } else { Cache::at(&self.cache) }
    }
}

#[derive(Debug, Subcommand)]
pub enum Command {
    /// Plan, execute (cached where possible) and write a new report version
    Run {
        /// The analysis spec (YAML)
        spec: PathBuf,
        #[command(flatten)]
        cache: CacheArgs,
        /// Compute only share K of N of the bootstrap replicates into the cache and write no
        /// report (a cluster job array; then run without `--shard`)
        #[arg(long, value_name = "K/N")]
        shard: Option<String>,
    },
    /// Validate and lint a spec against its data files; computes nothing
    Check {
        /// The analysis spec (YAML)
        spec: PathBuf,
    },
    /// List the steps with their keys and whether each is cached; computes nothing
    Plan {
        /// The analysis spec (YAML)
        spec: PathBuf,
        #[command(flatten)]
        cache: CacheArgs,
    },
    /// What changed between two report versions (Markdown, fit for a review comment)
    Diff {
        /// The older version folder
        from: PathBuf,
        /// The newer version folder
        to: PathBuf,
    },
    /// Draw survey data from a declared latent model (see docs/simulate.md)
    Simulate {
        /// The model file (YAML)
        model: PathBuf,
        /// Output file, .csv or .parquet
        #[arg(long, value_name = "FILE")]
        out: PathBuf,
        /// Number of respondents (default: the model's `n`)
        #[arg(long)]
        n: Option<usize>,
        /// Random seed (default: the model's `seed`); the same seed gives identical output
        #[arg(long)]
        seed: Option<u64>,
        /// Replace a constant column's value, e.g. `--set wave=autumn`, or the id column's first
        /// value, e.g. `--set rider_id=601` (repeatable)
        #[arg(long, value_name = "NAME=VALUE")]
        set: Vec<String>,
    },
    /// Design study: draw many datasets from a model at several sample sizes, analyse each with
    /// the spec, and report how often the truth is recovered (see docs/power.md)
    Power {
        /// The model file to draw from (YAML, as for `simulate`)
        model: PathBuf,
        /// The analysis spec (YAML); its data files need not exist
        spec: PathBuf,
        /// Sample sizes, comma-separated, e.g. `300,600,1000`
        #[arg(long, value_name = "N,N,..")]
        n: String,
        /// Replicates (drawn datasets) per sample size
        #[arg(long, default_value = "500", value_name = "R")]
        replicates: String,
        /// Random seed of the study (default: the model's `seed`)
        #[arg(long)]
        seed: Option<String>,
        /// Folder for the study's report versions (`DIR/v1`, `DIR/v2`, ...)
        #[arg(long, value_name = "DIR")]
        out: PathBuf,
        /// Recovery share the smallest sufficient n must reach
        #[arg(long, default_value = "0.8")]
        target: String,
        /// Compute only share K of N into the cache and write no report (a cluster job array)
        #[arg(long, value_name = "K/N")]
        shard: Option<String>,
        /// Also run the spec's bootstrap (`analyses.resample`) on every replicate
        #[arg(long)]
        with_resampling: bool,
        /// Also run the spec's sensitivity analysis on every replicate
        #[arg(long)]
        with_sensitivity: bool,
        #[command(flatten)]
        cache: CacheArgs,
    },
    /// Recompute a report version from its manifest without the cache; exit 1 on any mismatch
    Verify {
        /// A report version folder, e.g. reports/transit-rider-panel/v1
        report_dir: PathBuf,
    },
    /// Print the JSON Schema (draft 2020-12) of the spec format or of results.json
    Schema {
        /// Which schema
        #[arg(value_enum)]
        which: SchemaWhich,
    },
}

#[derive(Debug, Clone, Copy, clap::ValueEnum)]
pub enum SchemaWhich {
    /// The analysis spec (for editors: see the README)
    Spec,
    /// results.json of a report version
    Results,
}

struct StderrLog;

impl Log for StderrLog {
    fn line(&mut self, text: &str) {
        eprintln!("{text}");
    }
    fn warn(&mut self, text: &str) {
        eprintln!("warning: {text}");
    }
    fn progress(&self) -> Box<dyn Progress> {
        Box::new(Bar(std::sync::Mutex::new(None)))
    }
}

/// A progress bar on stderr when it is a terminal (nothing otherwise, so logs and tests stay
/// clean). The only place construe draws one.
struct Bar(std::sync::Mutex<Option<indicatif::ProgressBar>>);

impl Progress for Bar {
    fn start(&self, step: StepKind, total: usize) {
        if !std::io::stderr().is_terminal() {
            return;
        }
        let bar = indicatif::ProgressBar::new(total as u64);
        if let Ok(style) = indicatif::ProgressStyle::with_template(&format!(
            "{:<12} {{bar:30}} {{pos}}/{{len}}, {{eta}} left",
            step.name()
        )) {
            bar.set_style(style);
        }
        if let Ok(mut slot) = self.0.lock() {
            *slot = Some(bar);
        }
    }
    fn advance(&self, _step: StepKind, by: usize) {
        if let Ok(slot) = self.0.lock()
            && let Some(bar) = slot.as_ref()
        {
            bar.inc(by as u64);
        }
    }
    fn finish(&self, _step: StepKind) {
        if let Ok(mut slot) = self.0.lock()
            && let Some(bar) = slot.take()
        {
            bar.finish_and_clear();
        }
    }
}

/// Prints a command-line parse outcome that is not a command to run (help, version, a usage
/// error) and returns its exit code: 0 for help and version, 1 for a usage error (a bad
/// command line is bad input, like a bad spec; 2 stays reserved for run-time failures).
/// A bare `construe` prints the help and exits 1.
pub fn usage_exit(e: &clap::Error) -> Exit {
    use clap::error::ErrorKind;
    // Printing can only fail on a closed stream; the exit code still says what happened.
    let _ = e.print();
    match e.kind() {
        ErrorKind::DisplayHelp | ErrorKind::DisplayVersion => Exit::Ok,
        _ => Exit::Invalid,
    }
}

/// Runs one parsed command line and returns the process exit code.
pub fn dispatch(cli: Cli) -> Exit {
    let result = match cli.command {
        Command::Run { spec, cache, shard: None } => run_command(&spec, &cache.resolve()),
        Command::Run { spec, cache, shard: Some(shard) } => {
            crate::app::shard::run_share(&spec, &shard, &cache.resolve(), &mut StderrLog).map(|s| {
                eprintln!(
                    "shard {shard}: {} {} replicates computed, {} reused; no report written (run without `--shard` to write it)",
                    s.computed,
                    s.step.name(),
                    s.reused
                );
                Exit::Ok
            })
        }
        Command::Check { spec } => check_command(&spec),
        Command::Plan { spec, cache } => plan_command(&spec, &cache.resolve()),
        Command::Verify { report_dir } => verify_command(&report_dir),
        Command::Power {
            model,
            spec,
            n,
            replicates,
            seed,
            out,
            target,
            shard,
            with_resampling,
            with_sensitivity,
            cache,
        } => power_command(
            &PowerArgs { model, spec, n, replicates, seed, out, target, shard, with_resampling, with_sensitivity },
            &cache.resolve(),
        ),
        Command::Schema { which } => {
            let kind = match which {
                SchemaWhich::Spec => SchemaKind::Spec,
                SchemaWhich::Results => SchemaKind::Results,
            };
            print!("{}", schema_text(kind));
            Ok(Exit::Ok)
        }
        Command::Diff { from, to } => crate::app::diff::diff_dirs(&from, &to).map(|c| {
            print!("{}", c.markdown(&from.display().to_string(), &to.display().to_string()));
            Exit::Ok
        }),
        Command::Simulate { model, out, n, seed, set } => {
            let req = crate::app::simulate::SimulateRequest { model: &model, out: &out, n, seed, set: &set };
            crate::app::simulate::simulate(&req).map_err(AppError::from).map(|rows| {
                eprintln!("wrote {} to {}", plural(rows, "row"), out.display());
                Exit::Ok
            })
        }
    };
    match result {
        Ok(code) => code,
        Err(e) => {
            eprintln!("{}", render_error(&e));
            e.exit()
        }
    }
}

fn render_error(e: &AppError) -> String {
    match e {
        AppError::Invalid(report) | AppError::Simulate(crate::app::simulate::SimulateError::Model(report)) => {
            report.to_string()
        }
        other => {
            let mut s = format!("error: {other}");
            if let Some(h) = other.hint() {
                s.push_str(&format!("\n  hint: {h}"));
            }
            s
        }
    }
}

fn run_command(spec: &std::path::Path, cache: &Cache) -> Result<Exit, AppError> {
    let summary = run(spec, cache, &mut StderrLog)?;
    match summary.outcome {
        WriteOutcome::Written { version, dir } => {
            eprintln!(
                "wrote report v{version} to {} ({} computed, {} cached)",
                dir.display(),
                summary.computed,
                summary.cached
            );
            if std::io::stdout().is_terminal() {
                println!("{}", dir.join("report.html").display());
            } else {
                println!("{}", dir.display());
            }
        }
        WriteOutcome::Unchanged { version, dir } => {
            eprintln!("nothing changed since v{version} ({}); no new version written", dir.display());
            println!("{}", dir.display());
        }
    }
    Ok(Exit::Ok)
}

fn check_command(spec: &std::path::Path) -> Result<Exit, AppError> {
    let checked = check_with_data(spec);
    if checked.report.has_errors() {
        return Err(AppError::Invalid(checked.report));
    }
    for d in &checked.report.diagnostics {
        eprintln!("{d}");
    }
    eprintln!("{}: ok ({})", spec.display(), plural(checked.report.warning_count(), "warning"));
    Ok(Exit::Ok)
}

fn plan_command(spec: &std::path::Path, cache: &Cache) -> Result<Exit, AppError> {
    let (lines, report) = plan(spec, cache)?;
    for d in &report.diagnostics {
        eprintln!("{d}");
    }
    for l in &lines {
        println!("{:<12} {}  {}", l.step, l.key, l.status);
    }
    Ok(Exit::Ok)
}

fn verify_command(report_dir: &std::path::Path) -> Result<Exit, AppError> {
    let verification = crate::app::verify::verify(report_dir)?;
    for c in &verification.checks {
        println!("{:<9} {:<28} {}", if c.ok { "match" } else { "MISMATCH" }, c.what, c.detail);
    }
    if verification.passed() {
        eprintln!("{}: verified ({} checks)", report_dir.display(), verification.checks.len());
        Ok(Exit::Ok)
    } else {
        let failed = verification.checks.iter().filter(|c| !c.ok).count();
        eprintln!("{}: {} failed", report_dir.display(), plural(failed, "check"));
        Ok(Exit::Invalid)
    }
}

struct PowerArgs {
    model: PathBuf,
    spec: PathBuf,
    n: String,
    replicates: String,
    seed: Option<String>,
    out: PathBuf,
    target: String,
    shard: Option<String>,
    with_resampling: bool,
    with_sensitivity: bool,
}

fn power_command(args: &PowerArgs, cache: &Cache) -> Result<Exit, AppError> {
    use crate::app::power::{PowerError, PowerRequest, Shard, parse_replicates, parse_sizes, parse_target, power};
    let seed = match &args.seed {
        Some(text) => Some(text.trim().parse::<u64>().map_err(|_| PowerError::Seed { text: text.clone() })?),
        None => None,
    };
    let shard = args.shard.as_deref().map(Shard::parse).transpose()?;
    let req = PowerRequest {
        model: &args.model,
        spec: &args.spec,
        sizes: parse_sizes(&args.n)?,
        replicates: parse_replicates(&args.replicates)?,
        seed,
        out: &args.out,
        target: parse_target(&args.target)?,
        shard,
        with_resampling: args.with_resampling,
        with_sensitivity: args.with_sensitivity,
    };
    let summary = power(&req, cache, &StudyBar::new())?;
    for w in &summary.warnings {
        eprintln!("warning: {w}");
    }
    let counts = format!("{} computed, {} reused", plural(summary.computed, "replicate"), summary.reused);
    if summary.computed > 0 {
        tracing::info!(
            "computed replicates: drawing and loading {:.2} s, analyses {:.2} s",
            summary.drawing_seconds,
            summary.analysis_seconds
        );
    }
    match (&summary.outcome, shard) {
        (None, Some(s)) => {
            eprintln!("shard {}/{}: {counts}; no report written (run without `--shard` to write it)", s.k, s.of)
        }
        (Some(WriteOutcome::Written { version, dir }), _) => {
            eprintln!("wrote study v{version} to {} ({counts})", dir.display());
            println!("{}", dir.display());
        }
        (Some(WriteOutcome::Unchanged { version, dir }), _) => {
            eprintln!("nothing changed since v{version} ({}; {counts}); no new version written", dir.display());
            println!("{}", dir.display());
        }
        (None, None) => {}
    }
    Ok(Exit::Ok)
}

/// Study progress: a bar on a terminal (replicates done, rate, time left); otherwise a line at
/// every tenth of the work, for batch logs.
struct StudyBar {
    bar: std::sync::Mutex<Option<indicatif::ProgressBar>>,
    done: std::sync::atomic::AtomicUsize,
    total: std::sync::atomic::AtomicUsize,
    started: std::time::Instant,
}

impl StudyBar {
    fn new() -> StudyBar {
        StudyBar {
            bar: std::sync::Mutex::new(None),
            done: 0.into(),
            total: 0.into(),
            started: std::time::Instant::now(),
        }
    }
}

impl crate::app::power::StudyProgress for StudyBar {
    fn start(&self, total: usize) {
        self.total.store(total, std::sync::atomic::Ordering::Relaxed);
        if !std::io::stderr().is_terminal() || total == 0 {
            return;
        }
        let bar = indicatif::ProgressBar::new(total as u64);
        if let Ok(style) =
            indicatif::ProgressStyle::with_template("replicates {bar:30} {pos}/{len}, {per_sec}, {eta} left")
        {
            bar.set_style(style);
        }
        if let Ok(mut slot) = self.bar.lock() {
            *slot = Some(bar);
        }
    }

    fn advance(&self, by: usize) {
        if let Ok(slot) = self.bar.lock()
            && let Some(bar) = slot.as_ref()
        {
            bar.inc(by as u64);
            return;
        }
        let total = self.total.load(std::sync::atomic::Ordering::Relaxed);
        let done = self.done.fetch_add(by, std::sync::atomic::Ordering::Relaxed) + by;
        let tenth = total.div_ceil(10).max(1);
        if total >= 20 && done.is_multiple_of(tenth) && done < total {
            let secs = self.started.elapsed().as_secs_f64();
            let rate = done as f64 / secs.max(1e-9);
            eprintln!(
                "replicates: {done}/{total}, {rate:.1}/s, about {:.0}s left",
                (total - done) as f64 / rate.max(1e-9)
            );
        }
    }

    fn finish(&self) {
        if let Ok(mut slot) = self.bar.lock()
            && let Some(bar) = slot.take()
        {
            bar.finish_and_clear();
        }
    }
}

//! The command line. The only module that reads arguments and prints.
//!
//! Exit codes: 0 success; 1 the run failed; 2 the input or the arguments are
//! wrong (nothing has been written).

/// A line of the report on standard output (`println!` unless `--quiet`;
/// see [`report`]).
macro_rules! say {
    () => {
        $crate::cli::report("\n")
    };
    ($($t:tt)*) => {
        $crate::cli::report(&format!("{}\n", format_args!($($t)*)))
    };
}

mod args;
mod demo;
mod index;
mod infer;
mod joint;
mod posterior;
mod predict;
mod progress;
mod residuals;
mod search;
mod sensitivity;
mod simulate;

use std::ffi::OsString;
use std::process::ExitCode;

use clap::Parser;

pub use args::{Args, Command};

/// Exit code for wrong input or arguments.
pub const EXIT_BAD_INPUT: u8 = 2;
/// Exit code for a run that failed.
pub const EXIT_FAILED: u8 = 1;

/// An error on its way to the user, with the exit code it maps to.
#[derive(Debug)]
pub struct CliError {
    pub code: u8,
    pub error: anyhow::Error,
}

impl CliError {
    pub fn bad_input(error: impl Into<anyhow::Error>) -> Self {
        CliError { code: EXIT_BAD_INPUT, error: error.into() }
    }
    pub fn failed(error: impl Into<anyhow::Error>) -> Self {
        CliError { code: EXIT_FAILED, error: error.into() }
    }
}

impl From<latens::pipeline::PipelineError> for CliError {
    fn from(e: latens::pipeline::PipelineError) -> Self {
        pipeline_error(e)
    }
}

/// Parses `args` (the first is the program name), runs, and returns the exit code.
pub fn main_with_args<I, T>(args: I) -> ExitCode
where
    I: IntoIterator<Item = T>,
    T: Into<OsString> + Clone,
{
    let args = match Args::try_parse_from(args) {
        Ok(a) => a,
        Err(e) => {
            // --help and --version are "errors" to clap but succeed for us.
            let _ = e.print();
            return ExitCode::from(if e.use_stderr() { EXIT_BAD_INPUT } else { 0 });
        }
    };
    match run(args) {
        Ok(()) => ExitCode::SUCCESS,
        Err(CliError { code, error }) => {
            if is_broken_pipe(&error) {
                return ExitCode::SUCCESS;
            }
            eprintln!("latens: error: {error:#}");
            ExitCode::from(code)
        }
    }
}

/// `--quiet`: no report on standard output, no progress bars or notes.
static QUIET: std::sync::atomic::AtomicBool = std::sync::atomic::AtomicBool::new(false);

pub(crate) fn quiet() -> bool {
    QUIET.load(std::sync::atomic::Ordering::Relaxed)
}

/// Prints report text on standard output; under `--quiet` only its warning
/// lines are printed, on standard error: a warning (the Sun near a search
/// region, say) is never silenced.
pub(crate) fn report(text: &str) {
    if !quiet() {
        print!("{text}");
        return;
    }
    for line in text.lines().map(str::trim_start) {
        if line.to_ascii_lowercase().starts_with("warning") {
            eprintln!("{line}");
        }
    }
}

/// A note on standard error ("note: ..."), unless `--quiet`.
pub(crate) fn note(text: &str) {
    if !quiet() {
        eprintln!("note: {text}");
    }
}

/// The chart files this run writes (`--charts`), set once at the start.
static CHART_FORMATS: std::sync::OnceLock<args::ChartFormats> = std::sync::OnceLock::new();

/// Writes a chart as `stem.png` (through a temporary file) and `stem.svg`
/// in `dir`, as `--charts` asks; each appears whole or not at all.
pub(crate) fn write_chart(
    dir: &std::path::Path,
    stem: &str,
    png: impl FnOnce(&std::path::Path) -> Result<(), String>,
    svg: impl FnOnce() -> Result<String, String>,
) -> anyhow::Result<()> {
    use args::ChartFormats::{Both, Png, Svg};
    let formats = CHART_FORMATS.get().copied().unwrap_or(Both);
    if matches!(formats, Both | Png) {
        write_png(&dir.join(format!("{stem}.png")), png)?;
    }
    if matches!(formats, Both | Svg) {
        let text = svg().map_err(|e| anyhow::anyhow!("drawing {stem}: {e}"))?;
        latens::io::write_atomically(&dir.join(format!("{stem}.svg")), text.as_bytes())?;
    }
    Ok(())
}

/// How a chart `stem` appears in a list of files written, as `--charts`
/// asks ("stem.png (.svg)", "stem.png", "stem.svg"), or `None` when no
/// chart is written.
pub(crate) fn chart_name(stem: &str) -> Option<String> {
    use args::ChartFormats::{Both, None as Neither, Png, Svg};
    match CHART_FORMATS.get().copied().unwrap_or(Both) {
        Both => Some(format!("{stem}.png (.svg)")),
        Png => Some(format!("{stem}.png")),
        Svg => Some(format!("{stem}.svg")),
        Neither => None,
    }
}

/// `chart_name(stem)` after ", " for a list of files, or nothing.
pub(crate) fn and_chart(stem: &str) -> String {
    chart_name(stem).map(|n| format!(", {n}")).unwrap_or_default()
}

fn run(args: Args) -> Result<(), CliError> {
    let _ = CHART_FORMATS.set(args.charts);
    QUIET.store(args.quiet || args.json, std::sync::atomic::Ordering::Relaxed);
    if let Some(n) = args.threads {
        if n == 0 {
            return Err(CliError::bad_input(anyhow::anyhow!("--threads must be at least 1")));
        }
        rayon::ThreadPoolBuilder::new()
            .num_threads(n)
            .build_global()
            .map_err(|e| CliError::failed(anyhow::anyhow!("--threads {n}: {e}")))?;
    }
    let started = std::time::SystemTime::now();
    // The directory each command writes into, and its name in the index.
    let (out, label): (std::path::PathBuf, String) = match &args.command {
        Command::Demo(d) => (d.out.clone(), "demo".into()),
        Command::Residuals(r) => (r.out.clone(), "residuals".into()),
        Command::Infer(i) => (i.resume.clone().unwrap_or_else(|| i.out.clone()), "infer".into()),
        Command::Sensitivity(s) => match (&s.command, &s.shard) {
            (Some(args::SensitivityCommand::Merge { out, .. }), _) => {
                (out.clone().unwrap_or_else(|| s.out.clone()), "sensitivity merge".into())
            }
            (None, Some(shard)) => (s.out.clone(), format!("sensitivity --shard {shard}")),
            (None, None) => (s.out.clone(), "sensitivity".into()),
        },
        Command::Predict(p) => (p.out.clone().unwrap_or_else(|| p.from.clone()), "predict".into()),
        Command::Simulate(s) => (s.out.clone(), "simulate".into()),
    };
    // The command's main result, for --json.
    let main_file = match &args.command {
        Command::Infer(_) => Some("summary.json"),
        Command::Residuals(_) => Some("fit.json"),
        Command::Sensitivity(s) if s.shard.is_none() => Some("sensitivity.json"),
        Command::Simulate(_) => Some("truth.json"),
        _ => None,
    };
    match args.command {
        Command::Demo(demo_args) => demo::run(&demo_args),
        Command::Residuals(r) => residuals::run(&r),
        Command::Infer(i) => infer::run(&i),
        Command::Sensitivity(s) => sensitivity::run(&s),
        Command::Predict(p) => predict::run(&p),
        Command::Simulate(s) => simulate::run(&s),
    }?;
    let record = index::write_index(&out, &label, started).map_err(CliError::failed)?;
    if args.json {
        let result = main_file
            .and_then(|f| std::fs::read_to_string(out.join(f)).ok())
            .and_then(|t| serde_json::from_str::<serde_json::Value>(&t).ok())
            .unwrap_or(serde_json::Value::Null);
        let doc = serde_json::json!({
            "command": label,
            "out": out.to_string_lossy(),
            "files": record.map(|r| r.files).unwrap_or_default(),
            "result": result,
        });
        let text = serde_json::to_string_pretty(&doc).map_err(|e| CliError::failed(anyhow::anyhow!(e)))?;
        use std::io::Write as _;
        writeln!(std::io::stdout(), "{text}").map_err(|e| CliError::failed(anyhow::anyhow!(e)))?;
    }
    Ok(())
}

fn is_broken_pipe(error: &anyhow::Error) -> bool {
    error
        .chain()
        .any(|e| e.downcast_ref::<std::io::Error>().is_some_and(|io| io.kind() == std::io::ErrorKind::BrokenPipe))
}

/// A range `MIN:MAX` of positive numbers with MIN < MAX (`what` names the
/// option in the message).
pub(crate) fn parse_range(text: &str, what: &str) -> Result<(f64, f64), CliError> {
    let bad = || CliError::bad_input(anyhow::anyhow!("{what}: expected MIN:MAX with 0 < MIN < MAX, got `{text}`"));
    let (a, b) = text.split_once(':').ok_or_else(bad)?;
    let (a, b): (f64, f64) = (a.trim().parse().map_err(|_| bad())?, b.trim().parse().map_err(|_| bad())?);
    if !(a.is_finite() && b.is_finite() && a > 0.0 && b > a) {
        return Err(bad());
    }
    Ok((a, b))
}

/// Writes a PNG chart without leaving half a file: plotters writes PNG
/// files itself, so `draw` draws to a temporary name beside `path`, which is
/// then renamed (and removed if drawing fails).
pub(crate) fn write_png(
    path: &std::path::Path,
    draw: impl FnOnce(&std::path::Path) -> Result<(), String>,
) -> anyhow::Result<()> {
    let stem = path.file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_default();
    let tmp = path.with_file_name(format!(".{stem}.{}.tmp.png", std::process::id()));
    if let Err(e) = draw(&tmp) {
        let _ = std::fs::remove_file(&tmp);
        anyhow::bail!("drawing {}: {e}", path.display());
    }
    std::fs::rename(&tmp, path).map_err(|e| anyhow::anyhow!("writing {}: {e}", path.display()))
}

/// A pipeline stage's error as the command line reports it: bad input
/// exits 2, a failed computation 1.
pub(crate) fn pipeline_error(e: latens::pipeline::PipelineError) -> CliError {
    match e {
        latens::pipeline::PipelineError::Input(_) | latens::pipeline::PipelineError::File(_) => CliError::bad_input(e),
        latens::pipeline::PipelineError::Failed { .. } | latens::pipeline::PipelineError::Interrupted { .. } => {
            CliError::failed(e)
        }
    }
}

/// Stop flag raised by Ctrl-C (installed once per process).
pub fn interrupt_flag() -> &'static std::sync::atomic::AtomicBool {
    static FLAG: std::sync::atomic::AtomicBool = std::sync::atomic::AtomicBool::new(false);
    static INSTALLED: std::sync::Once = std::sync::Once::new();
    INSTALLED.call_once(|| {
        let _ = ctrlc::set_handler(|| FLAG.store(true, std::sync::atomic::Ordering::SeqCst));
    });
    &FLAG
}

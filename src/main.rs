//! The benchrec command line. Exit status: 0 success, 1 a notebook has problems, 2 usage.

use benchrec::attest::{self, SignRequest};
use benchrec::batch::{self, Outcome};
use benchrec::pipeline::{self, Failure};
use benchrec::{export, starter};
use clap::{CommandFactory, Parser, Subcommand, ValueEnum};
use std::io::IsTerminal;
use std::path::{Path, PathBuf};
use std::process::ExitCode;
use std::sync::Mutex;
use terminal::{count, missing, paint, paint_err, ColorWhen, Tone};

mod manpage;
mod terminal;

// Typesetting allocates many small short-lived objects from both build threads; mimalloc
// keeps per-thread heaps and returns freed memory, where the system allocator fragmented.
#[global_allocator]
static ALLOC: mimalloc::MiMalloc = mimalloc::MiMalloc;

/// Writes a line to standard output. A write error (a full disk, a closed file) is one line on
/// standard error and exit status 1; a closed pipe ends the process quietly (SIGPIPE).
macro_rules! say {
    ($($arg:tt)*) => {{
        use std::io::Write as _;
        let mut out = std::io::stdout().lock();
        if let Err(e) = writeln!(out, $($arg)*).and_then(|()| out.flush()) {
            write_failed(&e);
        }
    }};
}

/// A status line (built, up to date, signed, watching) on standard error, unless `-q`.
macro_rules! status {
    ($($arg:tt)*) => {{
        if !terminal::quiet() {
            use std::io::Write as _;
            // Best effort: a status line that cannot be written is no reason to fail.
            let _ = writeln!(std::io::stderr().lock(), $($arg)*);
        }
    }};
}

/// As [`say!`], without the line end.
macro_rules! say_raw {
    ($($arg:tt)*) => {{
        use std::io::Write as _;
        let mut out = std::io::stdout().lock();
        if let Err(e) = write!(out, $($arg)*).and_then(|()| out.flush()) {
            write_failed(&e);
        }
    }};
}

fn write_failed(e: &std::io::Error) -> ! {
    eprintln!("error: cannot write to standard output: {e}");
    std::process::exit(1)
}

#[derive(Parser)]
#[command(
    name = "benchrec",
    version,
    about = "Turn a Markdown bench notebook of AC readings into a typeset PDF record"
)]
struct Cli {
    #[command(subcommand)]
    verb: Verb,
    /// No status lines (built, up to date, signed, watching); errors and results still print
    #[arg(short, long, global = true)]
    quiet: bool,
    /// Colour the words that matter (error, warning, FAIL): on a terminal (auto, the default,
    /// and never when NO_COLOR is set), always, or never
    #[arg(
        long,
        value_enum,
        global = true,
        default_value = "auto",
        value_name = "WHEN"
    )]
    color: ColorWhen,
}

#[derive(Clone, Copy, ValueEnum)]
enum Format {
    Json,
    Csv,
}

#[derive(Clone, Copy, ValueEnum)]
enum Shell {
    Bash,
    Zsh,
    Fish,
    Elvish,
    Powershell,
}

#[derive(Subcommand)]
enum Verb {
    /// Reduce notebooks and write their PDF records (default: <stem>.pdf beside each one)
    #[command(
        after_help = "Examples:\n  benchrec build lab/notebook.md\n  benchrec build lab/ -o archive/"
    )]
    Build {
        /// Notebook files, or folders to search for notebooks (.md with a `record` key)
        #[arg(required = true)]
        paths: Vec<PathBuf>,
        /// Output file (one notebook), or a folder (several; folders are mirrored under it)
        #[arg(short = 'o', long = "output")]
        output: Option<PathBuf>,
        /// Rebuild even when a record is up to date
        #[arg(long)]
        force: bool,
    },
    /// Parse and reduce, report every problem, write nothing
    #[command(
        after_help = "Examples:\n  benchrec check lab/notebook.md\n  benchrec check -v --strict lab/"
    )]
    Check {
        /// Notebook files, or folders to search for notebooks
        #[arg(required = true)]
        paths: Vec<PathBuf>,
        /// Also print the notes on the method (warnings are always printed)
        #[arg(short, long)]
        verbose: bool,
        /// Exit 1 when a notebook has warnings, a verdict other than pass or a safety limit
        /// exceeded, as well as on errors
        #[arg(long)]
        strict: bool,
    },
    /// Print results on standard output (SI units): JSON for one notebook (an array for
    /// several), or one CSV table with a path column
    #[command(
        after_help = "Examples:\n  benchrec results lab/notebook.md\n  benchrec results lab/ --format csv > all.csv"
    )]
    Results {
        /// Notebooks, or folders to search for notebooks
        #[arg(required = true)]
        paths: Vec<PathBuf>,
        /// json: FORMAT.md's document (an array for several notebooks); csv: one row per result
        #[arg(long, value_enum, default_value = "json")]
        format: Format,
    },
    /// Sign a notebook: name, time and digest of its front matter and readings, with an SSH
    /// key signature when --key is given
    #[command(
        after_help = "Example:\n  benchrec sign lab/notebook.md --by ana@lab.example --key ~/.ssh/benchrec_ana"
    )]
    Sign {
        /// The notebook to sign (its `signoff` entry is written in place, atomically)
        notebook: PathBuf,
        /// Name or identity of the person signing (as listed in the allowed-signers file)
        #[arg(long)]
        by: String,
        /// Time of signing (ISO 8601 date-time); default: now, in UTC
        #[arg(long)]
        on: Option<String>,
        /// OpenSSH private key to sign with (ed25519, without a passphrase)
        #[arg(long, value_name = "PRIVATE_KEY")]
        key: Option<PathBuf>,
        /// Sign a record with flags, a verdict other than pass or a safety limit exceeded,
        /// giving the reason (printed in the sign-off box)
        #[arg(long, value_name = "REASON")]
        accept: Option<String>,
    },
    /// Say what a record's sign-off proves: a notebook, a PDF, or every PDF under a folder
    #[command(
        after_help = "Examples:\n  benchrec verify lab/notebook.pdf\n  benchrec verify archive/ --signers allowed_signers"
    )]
    Verify {
        /// A notebook, a record PDF, or a folder of record PDFs
        path: PathBuf,
        /// OpenSSH allowed-signers file: accept only keys listed for the signer's name
        #[arg(long, value_name = "FILE")]
        signers: Option<PathBuf>,
    },
    /// Write DIR/index.html and DIR/index.pdf: every record PDF under DIR with its state,
    /// verdict counts, warnings and instruments past due (incremental)
    #[command(after_help = "Example:\n  benchrec index archive/")]
    Index {
        /// The archive folder (searched recursively)
        dir: PathBuf,
    },
    /// Follow a check standard (a part, or a lot unit's serial) through every record under a
    /// folder: its values with U by date, an individuals control chart and the drift
    #[command(
        after_help = "Example:\n  benchrec trend lab/ --part CS-100n -o lab/CS-100n-trend.pdf"
    )]
    Trend {
        /// The folder of notebooks to search
        dir: PathBuf,
        /// The part's name as the notebooks give it, or a lot unit's serial
        #[arg(long)]
        part: String,
        /// The judged result to follow when the part has several (C, L, R)
        #[arg(long)]
        result: Option<String>,
        /// Where to write the trend record (default: DIR/trend-PART.pdf)
        #[arg(short = 'o', long = "output")]
        output: Option<PathBuf>,
    },
    /// Compare the judged results two notebooks give for the same parts by the E_n number
    /// (ISO 13528): |E_n| ≤ 1 is satisfactory
    #[command(after_help = "Example:\n  benchrec compare before.md after.md")]
    Compare {
        /// The first notebook
        first: PathBuf,
        /// The second notebook
        second: PathBuf,
    },
    /// Rebuild a notebook (or every notebook under a folder) each time it is saved
    #[command(after_help = "Example:\n  benchrec watch lab/notebook.md")]
    Watch {
        /// A notebook, or a folder of notebooks
        path: PathBuf,
        /// Stop after this many builds (for scripts and tests)
        #[arg(long, hide = true)]
        max_builds: Option<usize>,
    },
    /// Write a starter notebook that builds as it stands
    #[command(after_help = "Example:\n  benchrec new lab/next.md --record LAB-0042")]
    New {
        /// Where to write it (never over an existing file)
        path: PathBuf,
        /// Record identifier (default: from the file name)
        #[arg(long)]
        record: Option<String>,
    },
    /// Print shell completions for benchrec
    #[command(
        after_help = "Example:\n  benchrec completions bash > ~/.local/share/bash-completion/completions/benchrec"
    )]
    Completions {
        /// The shell to write completions for
        #[arg(value_enum)]
        shell: Shell,
    },
    /// Print the man page (roff) for benchrec
    #[command(after_help = "Example:\n  benchrec man > benchrec.1 && man -l benchrec.1")]
    Man,
}

fn main() -> ExitCode {
    // Output piped into `head` and closed early ends the process quietly, as other filters
    // do, instead of a panic on a failed write.
    #[cfg(unix)]
    unsafe {
        libc::signal(libc::SIGPIPE, libc::SIG_DFL);
    }
    // No transparent huge pages: the allocator asks for them, and the first touch of each
    // then clears 2 MiB, which cost a short record up to 40 % of its CPU time (measured with
    // perf on the coil demo; the whole run touches far less than that).
    #[cfg(target_os = "linux")]
    unsafe {
        libc::prctl(libc::PR_SET_THP_DISABLE, 1, 0, 0, 0);
    }
    let cli = Cli::parse();
    terminal::init(cli.quiet, cli.color);
    match cli.verb {
        Verb::Build {
            paths,
            output,
            force,
        } => build(&paths, output.as_deref(), force),
        Verb::Check {
            paths,
            verbose,
            strict,
        } => check(&paths, verbose, strict),
        Verb::Results { paths, format } => results(&paths, format),
        Verb::Sign {
            notebook,
            by,
            on,
            key,
            accept,
        } => sign(
            &notebook,
            &SignRequest {
                by,
                on,
                key,
                accept,
            },
        ),
        Verb::Verify { path, signers } => verify(&path, signers.as_deref()),
        Verb::Watch { path, max_builds } => watch(&path, max_builds),
        Verb::Index { dir } => index(&dir),
        Verb::Trend {
            dir,
            part,
            result,
            output,
        } => trend(&dir, &part, result.as_deref(), output.as_deref()),
        Verb::Compare { first, second } => compare(&first, &second),
        Verb::New { path, record } => new_notebook(&path, record),
        Verb::Completions { shell } => {
            use clap_complete::Shell as S;
            let sh = match shell {
                Shell::Bash => S::Bash,
                Shell::Zsh => S::Zsh,
                Shell::Fish => S::Fish,
                Shell::Elvish => S::Elvish,
                Shell::Powershell => S::PowerShell,
            };
            let mut buf = Vec::new();
            clap_complete::generate(sh, &mut Cli::command(), "benchrec", &mut buf);
            say_raw!("{}", String::from_utf8_lossy(&buf));
            ExitCode::SUCCESS
        }
        Verb::Man => match manpage::render(&Cli::command()) {
            Ok(page) => {
                say_raw!("{page}");
                ExitCode::SUCCESS
            }
            Err(e) => {
                eprintln!("error: {e}");
                ExitCode::from(1)
            }
        },
    }
}

fn fail(f: &Failure) -> ExitCode {
    eprint!("{}", terminal::report(&f.report()));
    ExitCode::from(1)
}

fn build(paths: &[PathBuf], output: Option<&Path>, force: bool) -> ExitCode {
    for p in paths {
        if !p.exists() {
            eprintln!("{}: {}", paint_err("error", Tone::Bad), missing(p));
            return ExitCode::from(1);
        }
    }
    let (found, walk_errors) = batch::discover(paths, output);
    let refused = batch::check_plan(&found.jobs);
    if !refused.is_empty() {
        for f in &refused {
            eprint!("{}", terminal::report(&f.report()));
        }
        return ExitCode::from(1);
    }
    let n = found.jobs.len();
    let tty = std::io::stderr().is_terminal();
    let bar = if tty && n > 1 {
        let b = indicatif::ProgressBar::new(n as u64);
        if let Ok(style) =
            indicatif::ProgressStyle::with_template("{bar:32} {pos}/{len} records  {msg}")
        {
            b.set_style(style);
        }
        Some(b)
    } else {
        None
    };
    let reports = Mutex::new(Vec::new());
    let outcomes = batch::run_all(&found.jobs, force, &|job, o| {
        if let Some(b) = &bar {
            b.inc(1);
            b.set_message(job.notebook.display().to_string());
        }
        if let Outcome::Failed(f) = o {
            if let Ok(mut r) = reports.lock() {
                r.push(f.report());
            }
        }
    });
    if let Some(b) = bar {
        b.finish_and_clear();
    }
    for r in reports.into_inner().unwrap_or_default() {
        eprint!("{}", terminal::report(&r));
    }
    for e in &walk_errors {
        eprint!("{}", terminal::report(&e.report()));
    }
    let (mut built, mut fresh, mut failed) = (0, 0, 0);
    let many = n > 1 || !found.skipped.is_empty();
    for (job, o) in found.jobs.iter().zip(&outcomes) {
        match o {
            Outcome::Built { output, seconds } => {
                built += 1;
                status!("built       {}  ({seconds:.2} s)", output.display());
            }
            Outcome::UpToDate { output } => {
                fresh += 1;
                status!("up to date  {}", output.display());
            }
            Outcome::Failed(f) => {
                failed += 1;
                status!(
                    "{}      {}  {}",
                    paint_err("FAILED", Tone::Bad),
                    job.notebook.display(),
                    f.summary()
                );
            }
        }
    }
    if many {
        for s in &found.skipped {
            status!("skipped     {}  (no `record` in front matter)", s.display());
        }
        status!(
            "{built} built, {fresh} up to date, {} skipped, {failed} failed",
            found.skipped.len()
        );
    }
    if failed > 0 || !walk_errors.is_empty() {
        ExitCode::from(1)
    } else {
        ExitCode::SUCCESS
    }
}

/// Every notebook under `paths`, analysed one by one as the iterator is read, with each lab
/// register read once (a broken one reported once, for the first notebook that uses it;
/// `done` names what the others were not).
fn analysed<'a>(
    paths: &[PathBuf],
    done: &'a str,
) -> impl Iterator<Item = (PathBuf, Result<benchrec::judge::Record, Failure>)> + 'a {
    let (found, _) = batch::discover(paths, None);
    let labs = batch::Labs::for_jobs(&found.jobs);
    found.jobs.into_iter().enumerate().map(move |(j, job)| {
        let nb = job.notebook;
        let rec = match labs.lab_of(j, &nb, done) {
            Ok(Some(lab)) => pipeline::render_file_with(&nb, lab.as_deref()).map(|(r, _)| r),
            Ok(None) => analyse(&nb),
            Err(f) => Err(f),
        };
        (nb, rec)
    })
}

/// Every notebook under `paths` analysed, with its path as found; the ones that fail are
/// reported on standard error, and the flag says whether any did.
fn records_of(paths: &[PathBuf]) -> (Vec<(String, benchrec::judge::Record)>, bool) {
    let mut recs = Vec::new();
    let mut failed = false;
    for (nb, rec) in analysed(paths, "read") {
        match rec {
            Ok(r) => recs.push((nb.display().to_string(), r)),
            Err(f) => {
                eprint!("{}", terminal::report(&f.report()));
                failed = true;
            }
        }
    }
    (recs, failed)
}

/// The validation `build` does, typesetting included (the PDF is made in memory and
/// dropped), so `check` and `results` accept exactly the notebooks `build` accepts.
fn analyse(nb: &Path) -> Result<benchrec::judge::Record, Failure> {
    pipeline::render_file(nb).map(|(rec, _pdf)| rec)
}

fn check(paths: &[PathBuf], verbose: bool, strict: bool) -> ExitCode {
    let mut failed = 0;
    let mut reserved = 0;
    for (nb, rec) in analysed(paths, "checked") {
        match rec {
            Ok(rec) => {
                let flags = rec.reduction.blocks.iter().flat_map(|b| &b.flags);
                let warnings: Vec<_> = flags.clone().filter(|f| f.warn).collect();
                let notes: Vec<_> = flags.filter(|f| !f.warn).collect();
                say!(
                    "{} {} ({}, {}, {})",
                    paint("ok", Tone::Good),
                    nb.display(),
                    count(rec.reduction.blocks.len(), "block", "blocks"),
                    count(warnings.len(), "warning", "warnings"),
                    count(notes.len(), "note", "notes"),
                );
                let at = |f: &benchrec::networks::Flag| match f.span {
                    Some(sp) => {
                        let (file, l, c) = rec.notebook.locate(sp);
                        let name = file.map_or(nb.display().to_string(), |t| t.name.clone());
                        format!("{name}:{l}:{c}")
                    }
                    None => nb.display().to_string(),
                };
                for f in &warnings {
                    say!(
                        "  {}: {}: {}",
                        paint("warning", Tone::Warn),
                        at(f),
                        f.message
                    );
                }
                if verbose {
                    for f in &notes {
                        say!("  note: {}: {}", at(f), f.message);
                    }
                }
                for v in &rec.verdicts {
                    let word = match v.outcome {
                        benchrec::judge::Outcome::Pass => {
                            paint(&format!("{:<12}", "pass"), Tone::Good)
                        }
                        benchrec::judge::Outcome::Fail => {
                            paint(&format!("{:<12}", "FAIL"), Tone::Bad)
                        }
                        benchrec::judge::Outcome::Inconclusive => {
                            paint(&format!("{:<12}", "inconclusive"), Tone::Warn)
                        }
                    };
                    match &v.serial {
                        Some(u) => say!(
                            "  {word} {} of {} unit {u} (block {})",
                            v.name,
                            v.part,
                            v.block
                        ),
                        None => say!("  {word} {} of {} (block {})", v.name, v.part, v.block),
                    }
                }
                if !benchrec::judge::reservations(&rec).is_empty() {
                    reserved += 1;
                }
            }
            Err(f) => {
                eprint!("{}", terminal::report(&f.report()));
                failed += 1;
            }
        }
    }
    if failed > 0 || (strict && reserved > 0) {
        ExitCode::from(1)
    } else {
        ExitCode::SUCCESS
    }
}

fn results(paths: &[PathBuf], format: Format) -> ExitCode {
    for p in paths {
        if !p.exists() {
            eprintln!("{}: {}", paint_err("error", Tone::Bad), missing(p));
            return ExitCode::from(1);
        }
    }
    // One notebook named: its JSON document, as FORMAT.md gives it. Anything else: an array.
    let single = paths.len() == 1 && !paths[0].is_dir();
    let (recs, failed) = records_of(paths);
    let rows: Vec<(&str, &benchrec::judge::Record)> =
        recs.iter().map(|(p, r)| (p.as_str(), r)).collect();
    match format {
        Format::Csv => say_raw!("{}", export::csv_string(&rows)),
        Format::Json if single => {
            if let Some((_, rec)) = rows.first() {
                say!("{}", export::json_string(rec));
            }
        }
        Format::Json => {
            let all: Vec<export::JsonRecord> =
                rows.iter().map(|(_, r)| export::to_json(r)).collect();
            say!("{}", serde_json::to_string_pretty(&all).unwrap_or_default());
        }
    }
    if failed {
        ExitCode::from(1)
    } else {
        ExitCode::SUCCESS
    }
}

fn sign(path: &Path, req: &SignRequest) -> ExitCode {
    let done = match attest::sign_file(path, req) {
        Ok(d) => d,
        Err(f) => return fail(&f),
    };
    let e = &done.entry;
    let how = match &e.key {
        Some(k) => format!("with key {k}"),
        None => "by name only (no --key: not authenticated)".into(),
    };
    status!(
        "signed {} as {} on {} {how} ({})",
        done.notebook.display(),
        e.by,
        e.on,
        e.digest
    );
    if let Some(a) = &e.accepted {
        status!("accepted with reservations: {a}");
    }
    match &done.rebuilt {
        Some(p) => status!("rebuilt {}", p.display()),
        None => status!(
            "no PDF beside it yet: run `benchrec build {}` to make the signed record",
            path.display()
        ),
    }
    ExitCode::SUCCESS
}

fn verify(path: &Path, signers: Option<&Path>) -> ExitCode {
    // Without --signers, the list the lab register names, if any.
    let list = match signers {
        Some(p) => attest::read_signers(p).map(Some),
        None => attest::register_signers(path),
    };
    let list = match list {
        Ok(l) => l,
        Err(f) => return fail(&f),
    };
    let with_list = list.is_some();
    if path.is_dir() {
        let reports = attest::verify_tree(path, list.as_ref());
        let mut bad = 0;
        for r in &reports {
            if !r.status.ok(with_list) {
                bad += 1;
            }
            say!("{:<13} {}  {}", r.status.word(), r.path.display(), r.detail);
        }
        say!(
            "{} checked, {} not valid{}",
            count(reports.len(), "record", "records"),
            bad,
            if with_list {
                ""
            } else {
                " (no --signers: keys were not checked against a list)"
            }
        );
        return if bad == 0 && !reports.is_empty() {
            ExitCode::SUCCESS
        } else {
            ExitCode::from(1)
        };
    }
    let r = attest::verify_file(path, list.as_ref());
    say!("{}: {}: {}", r.status.word(), r.path.display(), r.detail);
    if r.status.ok(with_list) {
        ExitCode::SUCCESS
    } else {
        ExitCode::from(1)
    }
}

fn index(dir: &Path) -> ExitCode {
    if !dir.is_dir() {
        eprintln!("error: {}: not a folder", dir.display());
        return ExitCode::from(1);
    }
    match benchrec::index::index_dir(dir) {
        Ok(ix) => {
            let bad = ix
                .rows
                .iter()
                .filter(|r| r.state == "error" || r.state == "mismatch")
                .count();
            status!(
                "indexed {} ({} read, {} unchanged) into {} and {}{}",
                count(ix.rows.len(), "record", "records"),
                ix.read,
                ix.rows.len() - ix.read,
                ix.html.display(),
                ix.pdf.display(),
                if bad > 0 {
                    format!("; {bad} could not be read or do not match")
                } else {
                    String::new()
                }
            );
            ExitCode::SUCCESS
        }
        Err(f) => fail(&f),
    }
}

fn trend(dir: &Path, part: &str, result: Option<&str>, output: Option<&Path>) -> ExitCode {
    if !dir.is_dir() {
        eprintln!(
            "{}: {}: not a folder",
            paint_err("error", Tone::Bad),
            dir.display()
        );
        return ExitCode::from(1);
    }
    let (recs, failed) = records_of(&[dir.to_path_buf()]);
    let t = benchrec::trend::gather(part, result, &recs);
    if t.points.is_empty() {
        eprintln!(
            "{}: no record under {} has a judged result for `{part}`{}",
            paint_err("error", Tone::Bad),
            dir.display(),
            result.map(|r| format!(" ({r})")).unwrap_or_default()
        );
        return ExitCode::from(1);
    }
    for p in &t.points {
        say!(
            "{}  {:<14} {}  {}",
            p.date,
            p.record,
            benchrec::print::value_u(p.value, p.expanded, t.unit),
            p.path
        );
    }
    match &t.chart {
        Some(c) => say!(
            "centre {}, limits [{}, {}] (x̄ ± 2.66·MR̄, NIST/SEMATECH §6.3.2.2)",
            benchrec::render::trend::at_values_place(&t, c.mean),
            benchrec::render::trend::at_values_place(&t, c.lcl),
            benchrec::render::trend::at_values_place(&t, c.ucl)
        ),
        None => say!("one value: no control chart"),
    }
    for w in benchrec::render::trend::warnings(&t) {
        say!("  {}: {w}", paint("warning", Tone::Warn));
    }
    let out = output
        .map(Path::to_path_buf)
        .unwrap_or_else(|| dir.join(format!("trend-{}.pdf", part.replace(['/', '\\'], "_"))));
    let written = benchrec::render::trend::trend_pdf(&t)
        .and_then(|pdf| pipeline::write_atomic(&out, &pdf).map_err(|e| e.to_string()));
    match written {
        Ok(()) => status!("wrote {}", out.display()),
        Err(e) => {
            eprintln!("{}: {}: {e}", paint_err("error", Tone::Bad), out.display());
            return ExitCode::from(1);
        }
    }
    if failed {
        ExitCode::from(1)
    } else {
        ExitCode::SUCCESS
    }
}

fn compare(first: &Path, second: &Path) -> ExitCode {
    let (a, b) = match (analyse(first), analyse(second)) {
        (Ok(a), Ok(b)) => (a, b),
        (Err(f), _) | (_, Err(f)) => return fail(&f),
    };
    let mut rows = 0;
    for va in &a.verdicts {
        let Some(vb) = b
            .verdicts
            .iter()
            .find(|v| v.part == va.part && v.name == va.name && v.serial == va.serial)
        else {
            continue;
        };
        let Some(en) = benchrec::trend::e_n(va.value, va.expanded, vb.value, vb.expanded) else {
            continue;
        };
        let word = if en.abs() <= 1.0 {
            paint("satisfactory", Tone::Good)
        } else {
            paint("unsatisfactory", Tone::Bad)
        };
        let who = match &va.serial {
            Some(s) => format!("{} of {} unit {s}", va.name, va.part),
            None => format!("{} of {}", va.name, va.part),
        };
        say!(
            "{who}: {} against {}: E_n = {} {word}",
            benchrec::print::value_u(va.value, va.expanded, va.unit),
            benchrec::print::value_u(vb.value, vb.expanded, vb.unit),
            benchrec::print::fixed(en, 2)
        );
        rows += 1;
    }
    if rows == 0 {
        eprintln!(
            "{}: {} and {} judge no result of the same part",
            paint_err("error", Tone::Bad),
            first.display(),
            second.display()
        );
        return ExitCode::from(1);
    }
    ExitCode::SUCCESS
}

fn watch(path: &Path, max_builds: Option<usize>) -> ExitCode {
    use notify::{RecursiveMode, Watcher};
    if !path.exists() {
        eprintln!("{}: {}", paint_err("error", Tone::Bad), missing(path));
        return ExitCode::from(1);
    }
    let (tx, rx) = std::sync::mpsc::channel();
    let mut watcher = match notify::recommended_watcher(move |e| {
        let _ = tx.send(e);
    }) {
        Ok(w) => w,
        Err(e) => {
            eprintln!("error: cannot watch {}: {e}", path.display());
            return ExitCode::from(1);
        }
    };
    // Watch the folder, so editors that save by renaming a new file into place are seen.
    let target = if path.is_dir() {
        path.to_path_buf()
    } else {
        path.parent().map(Path::to_path_buf).unwrap_or_default()
    };
    let target = if target.as_os_str().is_empty() {
        PathBuf::from(".")
    } else {
        target
    };
    if let Err(e) = watcher.watch(&target, RecursiveMode::Recursive) {
        eprintln!("error: cannot watch {}: {e}", target.display());
        return ExitCode::from(1);
    }
    let canon = |p: &Path| p.canonicalize().unwrap_or_else(|_| p.to_path_buf());
    let single = if path.is_file() {
        Some(canon(path))
    } else {
        None
    };
    status!("watching {} (Ctrl-C to stop)", path.display());
    let mut builds = 0usize;
    // Build key last built per notebook (its bytes and the files it names, table files
    // included): a save that changes nothing is not rebuilt.
    let mut last: std::collections::HashMap<PathBuf, String> = std::collections::HashMap::new();
    let build_one = |nb: &Path, builds: &mut usize| {
        let t0 = std::time::Instant::now();
        if let Some(dir) = nb.parent() {
            pipeline::sweep_temps(dir);
        }
        match pipeline::build_file(nb, None) {
            Ok(out) => status!(
                "built       {}  ({:.2} s)",
                out.display(),
                t0.elapsed().as_secs_f64()
            ),
            Err(f) => {
                eprint!("{}", terminal::report(&f.report()));
                status!(
                    "{}      {}  ({:.2} s): the last good PDF is kept",
                    paint_err("FAILED", Tone::Bad),
                    nb.display(),
                    t0.elapsed().as_secs_f64()
                );
            }
        }
        *builds += 1;
    };
    loop {
        if max_builds.is_some_and(|m| builds >= m) {
            return ExitCode::SUCCESS;
        }
        let Ok(first) = rx.recv() else {
            return ExitCode::SUCCESS;
        };
        let mut events = vec![first];
        // Editors write in bursts: gather what arrives within a short pause.
        while let Ok(e) = rx.recv_timeout(std::time::Duration::from_millis(60)) {
            events.push(e);
        }
        let mut changed: Vec<PathBuf> = Vec::new();
        for ev in events.into_iter().flatten() {
            if matches!(ev.kind, notify::EventKind::Access(_)) {
                continue;
            }
            for p in ev.paths {
                if p.extension().and_then(|e| e.to_str()) != Some("md") {
                    // Another file (a table a notebook reads): look again at every notebook
                    // seen, the build key tells which it changes.
                    for nb in single.iter().chain(last.keys()) {
                        if !changed.contains(nb) {
                            changed.push(nb.clone());
                        }
                    }
                    continue;
                }
                if !p.is_file() {
                    continue;
                }
                let p = canon(&p);
                let wanted = match &single {
                    Some(s) => &p == s,
                    None => pipeline::read_notebook_bytes(&p).is_ok_and(|b| {
                        batch::head_kind(&String::from_utf8_lossy(&b)) != batch::Head::Other
                    }),
                };
                if wanted && !changed.contains(&p) {
                    changed.push(p);
                }
            }
        }
        for nb in changed {
            let Ok(bytes) = pipeline::read_notebook_bytes(&nb) else {
                continue;
            };
            let key = batch::build_key(&nb, &bytes);
            if last.get(&nb) == Some(&key) {
                continue;
            }
            last.insert(nb.clone(), key);
            build_one(&nb, &mut builds);
        }
    }
}

fn new_notebook(path: &Path, record: Option<String>) -> ExitCode {
    if path.exists() {
        eprintln!(
            "error: {} already exists; benchrec new never overwrites a file",
            path.display()
        );
        return ExitCode::from(1);
    }
    let record = record.unwrap_or_else(|| {
        path.file_stem()
            .map(|s| s.to_string_lossy().to_uppercase())
            .unwrap_or_else(|| "NEW-0001".into())
    });
    let date = chrono::Utc::now().format("%Y-%m-%d").to_string();
    let text = starter::starter(&record, &date);
    if let Some(dir) = path.parent() {
        if !dir.as_os_str().is_empty() && !dir.exists() {
            if let Err(e) = std::fs::create_dir_all(dir) {
                eprintln!("error: {}: {e}", dir.display());
                return ExitCode::from(1);
            }
        }
    }
    match pipeline::write_atomic(path, text.as_bytes()) {
        Ok(()) => {
            status!(
                "wrote {}: edit it, then `benchrec build {}`",
                path.display(),
                path.display()
            );
            ExitCode::SUCCESS
        }
        Err(e) => {
            eprintln!("error: {}: {e}", path.display());
            ExitCode::from(1)
        }
    }
}

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
    /// Print results on standard output (SI units): JSON for one notebook, or CSV
    Results {
        /// A notebook, or a folder (one CSV table for every notebook under it)
        path: PathBuf,
        #[arg(long, value_enum, default_value = "json")]
        format: Format,
    },
    /// Sign a notebook: name, time and digest of its front matter and readings, with an SSH
    /// key signature when --key is given
    Sign {
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
    Verify {
        path: PathBuf,
        /// OpenSSH allowed-signers file: accept only keys listed for the signer's name
        #[arg(long, value_name = "FILE")]
        signers: Option<PathBuf>,
    },
    /// Write DIR/index.html and DIR/index.pdf: every record PDF under DIR with its state,
    /// verdict counts, warnings and instruments past due (incremental)
    Index { dir: PathBuf },
    /// Rebuild a notebook (or every notebook under a folder) each time it is saved
    Watch {
        path: PathBuf,
        /// Stop after this many builds (for scripts and tests)
        #[arg(long, hide = true)]
        max_builds: Option<usize>,
    },
    /// Write a starter notebook that builds as it stands
    New {
        path: PathBuf,
        /// Record identifier (default: from the file name)
        #[arg(long)]
        record: Option<String>,
    },
    /// Print shell completions for benchrec
    Completions {
        #[arg(value_enum)]
        shell: Shell,
    },
    /// Print the man page (roff) for benchrec
    Man,
}

fn main() -> ExitCode {
    // Output piped into `head` and closed early ends the process quietly, as other filters
    // do, instead of a panic on a failed write.
    #[cfg(unix)]
    unsafe {
        libc::signal(libc::SIGPIPE, libc::SIG_DFL);
    }
    let cli = Cli::parse();
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
        Verb::Results { path, format } => results(&path, format),
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
        Verb::Man => {
            let man = clap_mangen::Man::new(Cli::command());
            let mut buf = Vec::new();
            match man.render(&mut buf) {
                Ok(()) => {
                    say_raw!("{}", String::from_utf8_lossy(&buf));
                    ExitCode::SUCCESS
                }
                Err(e) => {
                    eprintln!("error: {e}");
                    ExitCode::from(1)
                }
            }
        }
    }
}

fn fail(f: &Failure) -> ExitCode {
    eprint!("{}", f.report());
    ExitCode::from(1)
}

fn build(paths: &[PathBuf], output: Option<&Path>, force: bool) -> ExitCode {
    for p in paths {
        if !p.exists() {
            eprintln!("error: {}: no such file or folder", p.display());
            return ExitCode::from(1);
        }
    }
    let (found, walk_errors) = batch::discover(paths, output);
    let refused = batch::check_plan(&found.jobs);
    if !refused.is_empty() {
        for f in &refused {
            eprint!("{}", f.report());
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
        eprint!("{r}");
    }
    for e in &walk_errors {
        eprint!("{}", e.report());
    }
    let (mut built, mut fresh, mut failed) = (0, 0, 0);
    let many = n > 1 || !found.skipped.is_empty();
    for (job, o) in found.jobs.iter().zip(&outcomes) {
        match o {
            Outcome::Built { output, seconds } => {
                built += 1;
                say!("built       {}  ({seconds:.2} s)", output.display());
            }
            Outcome::UpToDate { output } => {
                fresh += 1;
                say!("up to date  {}", output.display());
            }
            Outcome::Failed(f) => {
                failed += 1;
                say!("FAILED      {}  {}", job.notebook.display(), f.summary());
            }
        }
    }
    if many {
        for s in &found.skipped {
            say!("skipped     {}  (no `record` in front matter)", s.display());
        }
        say!(
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

/// Every notebook named or found under the folders named.
fn notebooks_of(paths: &[PathBuf]) -> Vec<PathBuf> {
    let (found, _) = batch::discover(paths, None);
    found.jobs.into_iter().map(|j| j.notebook).collect()
}

/// The validation `build` does, typesetting included (the PDF is made in memory and
/// dropped), so `check` and `results` accept exactly the notebooks `build` accepts.
fn analyse(nb: &Path) -> Result<benchrec::judge::Record, Failure> {
    pipeline::render_file(nb).map(|(rec, _pdf)| rec)
}

fn check(paths: &[PathBuf], verbose: bool, strict: bool) -> ExitCode {
    let mut failed = 0;
    let mut reserved = 0;
    for nb in notebooks_of(paths) {
        match analyse(&nb) {
            Ok(rec) => {
                let n = |c: usize, one: &str, many: &str| {
                    format!("{c} {}", if c == 1 { one } else { many })
                };
                let flags = rec.reduction.blocks.iter().flat_map(|b| &b.flags);
                let warnings: Vec<_> = flags.clone().filter(|f| f.warn).collect();
                let notes: Vec<_> = flags.filter(|f| !f.warn).collect();
                say!(
                    "ok {} ({}, {}, {})",
                    nb.display(),
                    n(rec.reduction.blocks.len(), "block", "blocks"),
                    n(warnings.len(), "warning", "warnings"),
                    n(notes.len(), "note", "notes"),
                );
                let at = |f: &benchrec::networks::Flag| match f.span {
                    Some(sp) => {
                        let (l, c) = benchrec::diag::line_col(&rec.notebook.source, sp.start);
                        format!("{}:{l}:{c}", nb.display())
                    }
                    None => nb.display().to_string(),
                };
                for f in &warnings {
                    say!("  warning: {}: {}", at(f), f.message);
                }
                if verbose {
                    for f in &notes {
                        say!("  note: {}: {}", at(f), f.message);
                    }
                }
                for v in &rec.verdicts {
                    let word = match v.outcome {
                        benchrec::judge::Outcome::Pass => "pass",
                        benchrec::judge::Outcome::Fail => "FAIL",
                        benchrec::judge::Outcome::Inconclusive => "inconclusive",
                    };
                    match &v.serial {
                        Some(u) => say!(
                            "  {word:<12} {} of {} unit {u} (block {})",
                            v.name,
                            v.part,
                            v.block
                        ),
                        None => say!("  {word:<12} {} of {} (block {})", v.name, v.part, v.block),
                    }
                }
                if !benchrec::judge::reservations(&rec).is_empty() {
                    reserved += 1;
                }
            }
            Err(f) => {
                eprint!("{}", f.report());
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

fn results(path: &Path, format: Format) -> ExitCode {
    if path.is_dir() {
        let mut recs = Vec::new();
        let mut failed = false;
        for nb in notebooks_of(&[path.to_path_buf()]) {
            match analyse(&nb) {
                Ok(r) => recs.push(r),
                Err(f) => {
                    eprint!("{}", f.report());
                    failed = true;
                }
            }
        }
        match format {
            Format::Csv => say_raw!("{}", export::csv_string(&recs.iter().collect::<Vec<_>>())),
            Format::Json => {
                let all: Vec<export::JsonRecord> = recs.iter().map(export::to_json).collect();
                say!("{}", serde_json::to_string_pretty(&all).unwrap_or_default());
            }
        }
        return if failed {
            ExitCode::from(1)
        } else {
            ExitCode::SUCCESS
        };
    }
    match analyse(path) {
        Ok(rec) => {
            match format {
                Format::Json => say!("{}", export::json_string(&rec)),
                Format::Csv => say_raw!("{}", export::csv_string(&[&rec])),
            }
            ExitCode::SUCCESS
        }
        Err(f) => fail(&f),
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
    say!(
        "signed {} as {} on {} {how} ({})",
        done.notebook.display(),
        e.by,
        e.on,
        e.digest
    );
    if let Some(a) = &e.accepted {
        say!("accepted with reservations: {a}");
    }
    match &done.rebuilt {
        Some(p) => say!("rebuilt {}", p.display()),
        None => say!(
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
            "{} record(s) checked, {} not valid{}",
            reports.len(),
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
            say!(
                "indexed {} record(s) ({} read, {} unchanged) into {} and {}{}",
                ix.rows.len(),
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

fn watch(path: &Path, max_builds: Option<usize>) -> ExitCode {
    use notify::{RecursiveMode, Watcher};
    if !path.exists() {
        eprintln!("error: {}: no such file or folder", path.display());
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
    say!("watching {} (Ctrl-C to stop)", path.display());
    let mut builds = 0usize;
    // Content last built per notebook: a save that changes nothing is not rebuilt.
    let mut last: std::collections::HashMap<PathBuf, Vec<u8>> = std::collections::HashMap::new();
    let build_one = |nb: &Path, builds: &mut usize| {
        let t0 = std::time::Instant::now();
        if let Some(dir) = nb.parent() {
            pipeline::sweep_temps(dir);
        }
        match pipeline::build_file(nb, None) {
            Ok(out) => say!(
                "built {} in {:.2} s",
                out.display(),
                t0.elapsed().as_secs_f64()
            ),
            Err(f) => {
                eprint!("{}", f.report());
                say!(
                    "not built {} ({:.2} s): the last good PDF is kept",
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
                if p.extension().and_then(|e| e.to_str()) != Some("md") || !p.is_file() {
                    continue;
                }
                let p = canon(&p);
                let wanted = match &single {
                    Some(s) => &p == s,
                    None => pipeline::read_notebook_bytes(&p)
                        .is_ok_and(|b| batch::looks_like_notebook(&String::from_utf8_lossy(&b))),
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
            if last.get(&nb) == Some(&bytes) {
                continue;
            }
            last.insert(nb.clone(), bytes);
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
            say!(
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

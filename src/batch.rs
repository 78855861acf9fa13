//! Lab-scale builds: find notebooks under folders, skip those whose PDF is up to date
//! (a content-addressed key beside the output), build the rest in parallel.

use crate::notebook;
use crate::pipeline::{self, Failure};
use crate::render;
use sha2::{Digest, Sha256};
use std::path::{Path, PathBuf};

/// One notebook to build and where its PDF goes.
#[derive(Debug, Clone)]
pub struct Job {
    pub notebook: PathBuf,
    pub output: PathBuf,
}

/// What discovery found.
#[derive(Debug, Default)]
pub struct Found {
    pub jobs: Vec<Job>,
    /// `.md` files without a `record` key in their front matter.
    pub skipped: Vec<PathBuf>,
}

/// Does this Markdown text open with front matter that has a top-level `record` key?
pub fn looks_like_notebook(text: &str) -> bool {
    head_kind(text) == Head::Notebook
}

/// What the head of a `.md` file says it is.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Head {
    /// Front matter with a top-level `record` key (quoted or not).
    Notebook,
    /// Front matter with a top-level key that is a near miss for `record` (`recrod`,
    /// `Record`): built, so the parser reports it at its line instead of a silent skip.
    NearMiss,
    /// Anything else: skipped and counted.
    Other,
}

/// Reads the front matter's top-level keys (up to its closing line).
pub fn head_kind(text: &str) -> Head {
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    let mut lines = text.lines();
    if lines.next().map(str::trim_end) != Some("---") {
        return Head::Other;
    }
    let mut near = false;
    for line in lines {
        let l = line.trim_end();
        if l == "---" || l == "..." {
            break;
        }
        if l.starts_with(char::is_whitespace) || l.starts_with('#') {
            continue;
        }
        let Some((key, _)) = l.split_once(':') else {
            continue;
        };
        let key = key.trim();
        let key = key
            .strip_prefix('"')
            .and_then(|k| k.strip_suffix('"'))
            .or_else(|| key.strip_prefix('\'').and_then(|k| k.strip_suffix('\'')))
            .unwrap_or(key);
        if key == "record" {
            return Head::Notebook;
        }
        near |= near_record(key);
    }
    if near {
        Head::NearMiss
    } else {
        Head::Other
    }
}

/// A key one or two edits from `record`, or `record` in another case.
fn near_record(key: &str) -> bool {
    key.len() <= 12
        && (key.eq_ignore_ascii_case("record") || strsim::levenshtein(key, "record") <= 2)
}

/// Notebook files named directly are always jobs; folders are walked (sorted, so the order is
/// stable) for `.md` files that look like notebooks. With `out_dir`, outputs mirror the tree
/// under it; otherwise each PDF lands beside its notebook.
pub fn discover(paths: &[PathBuf], out_dir: Option<&Path>) -> (Found, Vec<Failure>) {
    let mut found = Found::default();
    let mut errors = Vec::new();
    let single_file = paths.len() == 1 && paths[0].is_file();
    for p in paths {
        if p.is_dir() {
            let walker = walkdir::WalkDir::new(p)
                .sort_by_file_name()
                .follow_links(false);
            for entry in walker {
                let entry = match entry {
                    Ok(e) => e,
                    Err(e) => {
                        errors.push(Failure::Io {
                            path: p.clone(),
                            message: e.to_string(),
                        });
                        continue;
                    }
                };
                let path = entry.path();
                let hidden =
                    entry.depth() > 0 && entry.file_name().to_string_lossy().starts_with('.');
                if !entry.file_type().is_file()
                    || hidden
                    || path.extension().and_then(|e| e.to_str()) != Some("md")
                {
                    continue;
                }
                // The walk does not follow links and keeps regular files only; read the head.
                let is_nb = std::fs::File::open(path)
                    .and_then(|f| {
                        use std::io::Read;
                        let mut head = Vec::new();
                        f.take(64 * 1024).read_to_end(&mut head).map(|_| head)
                    })
                    .map(|b| head_kind(&String::from_utf8_lossy(&b)) != Head::Other)
                    .unwrap_or(false);
                if !is_nb {
                    found.skipped.push(path.to_path_buf());
                    continue;
                }
                let output = match out_dir {
                    Some(o) => {
                        let rel = path.strip_prefix(p).unwrap_or(path);
                        o.join(rel).with_extension("pdf")
                    }
                    None => pipeline::default_output(path),
                };
                found.jobs.push(Job {
                    notebook: path.to_path_buf(),
                    output,
                });
            }
        } else {
            let output = match out_dir {
                Some(o) if single_file && !o.is_dir() => o.to_path_buf(),
                Some(o) => o.join(pipeline::default_output(p).file_name().unwrap_or_default()),
                None => pipeline::default_output(p),
            };
            found.jobs.push(Job {
                notebook: p.clone(),
                output,
            });
        }
    }
    (found, errors)
}

/// Where the cache key of an output is kept: `.benchrec/<file name>.key` beside the output.
pub fn key_path(output: &Path) -> PathBuf {
    let dir = output.parent().unwrap_or(Path::new(""));
    let name = output
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    dir.join(".benchrec").join(format!("{name}.key"))
}

/// The content key of a build: tool version, built-in template, the notebook bytes, and the
/// bytes of every file it names (a user template, images, table files). Named files are read only through
/// [`pipeline::read_named`], so nothing outside the folder, no special file and nothing over
/// its cap is opened; a file refused or missing hashes as absent and the build reports it.
pub fn build_key(notebook_path: &Path, raw: &[u8]) -> String {
    build_key_with(notebook_path, raw, None)
}

/// [`build_key`] with the lab register that applies: its path and bytes, and its default
/// template's bytes, count too (nothing changes for a notebook without one).
pub fn build_key_with(notebook_path: &Path, raw: &[u8], lab: Option<&pipeline::Lab>) -> String {
    let mut h = Sha256::new();
    h.update(b"benchrec build key 2\0");
    h.update(env!("CARGO_PKG_VERSION").as_bytes());
    h.update(b"\0");
    h.update(render::BUILTIN_TEMPLATE.as_bytes());
    h.update(b"\0");
    h.update(raw);
    let folder = pipeline::notebook_folder(notebook_path);
    if let (Ok(text), Ok(folder)) = (std::str::from_utf8(raw), folder) {
        if let Ok(nb) = notebook::parse_with(text, lab.map(|l| &l.register)) {
            let mut named: Vec<(String, u64)> = Vec::new();
            if let Some((t, _)) = &nb.front.template {
                named.push((t.clone(), pipeline::TEMPLATE_MAX_BYTES));
            }
            for (rel, _) in pipeline::image_refs_in(&nb.items) {
                let cap = pipeline::image_cap(&rel);
                named.push((rel, cap));
            }
            for (rel, _) in notebook::table_refs(&nb) {
                named.push((rel, notebook::TABLE_MAX_BYTES));
            }
            for (n, cap) in named {
                h.update(b"\0file\0");
                h.update(n.as_bytes());
                h.update(b"\0");
                if let Ok(bytes) = pipeline::read_named(&folder, &n, cap) {
                    h.update(Sha256::digest(&bytes));
                }
            }
        }
    }
    if let Some(lab) = lab {
        h.update(b"\0lab\0");
        h.update(lab.path.to_string_lossy().as_bytes());
        h.update(b"\0");
        h.update(Sha256::digest(&lab.raw));
        if let Some((t, _)) = &lab.register.defaults.template {
            h.update(b"\0template\0");
            let bytes = pipeline::read_named(lab.folder(), t, pipeline::TEMPLATE_MAX_BYTES);
            h.update(Sha256::digest(bytes.unwrap_or_default()));
        }
    }
    hex(&h.finalize())
}

fn hex(bytes: &[u8]) -> String {
    bytes.iter().map(|b| format!("{b:02x}")).collect()
}

/// Modification time of a file in nanoseconds since the epoch (0 when unknown).
fn mtime_ns(meta: &std::fs::Metadata) -> u128 {
    meta.modified()
        .ok()
        .and_then(|t| t.duration_since(std::time::UNIX_EPOCH).ok())
        .map_or(0, |d| d.as_nanos())
}

/// What the key file holds: the build key, then the size, SHA-256 and modification time of
/// the PDF written.
fn key_text(key: &str, pdf: &[u8], output: &Path) -> String {
    let mtime = std::fs::metadata(output).map_or(0, |m| mtime_ns(&m));
    format!(
        "{key}\npdf {} {} {mtime}\n",
        pdf.len(),
        hex(&Sha256::digest(pdf))
    )
}

/// Is `output` the PDF that a build with `key` wrote? The key must match and the file on
/// disk must have the recorded size; when its modification time differs from the recorded
/// one, its SHA-256 must match too. A truncated or altered PDF is rebuilt.
fn up_to_date(output: &Path, kp: &Path, key: &str) -> bool {
    let Ok(text) = std::fs::read_to_string(kp) else {
        return false;
    };
    let mut lines = text.lines();
    if lines.next().map(str::trim) != Some(key) {
        return false;
    }
    let Some(rest) = lines.next().and_then(|l| l.strip_prefix("pdf ")) else {
        return false;
    };
    let fields: Vec<&str> = rest.split_whitespace().collect();
    let [size, sum, mtime] = fields[..] else {
        return false;
    };
    let Ok(meta) = std::fs::metadata(output) else {
        return false;
    };
    if !meta.is_file() || size.parse::<u64>().ok() != Some(meta.len()) {
        return false;
    }
    if mtime
        .parse::<u128>()
        .is_ok_and(|t| t != 0 && t == mtime_ns(&meta))
    {
        return true;
    }
    pipeline::read_regular(output, meta.len()).is_ok_and(|b| hex(&Sha256::digest(&b)) == sum)
}

#[derive(Debug)]
pub enum Outcome {
    Built { output: PathBuf, seconds: f64 },
    UpToDate { output: PathBuf },
    Failed(Failure),
}

/// Builds one job unless its output is up to date (and `force` is off).
pub fn run_job(job: &Job, force: bool) -> Outcome {
    match pipeline::lab_for(&job.notebook) {
        Ok(lab) => run_job_with(job, force, lab.as_ref()),
        Err(f) => Outcome::Failed(f),
    }
}

/// The lab registers of a batch, each read once before the builds start.
pub struct Labs {
    /// Per job: its register, or the index of its broken register in `broken`.
    of_job: Vec<Result<Option<std::sync::Arc<pipeline::Lab>>, usize>>,
    /// Each broken register's failure and the first job (in job order) that uses it, which
    /// reports it; the others say where it was reported.
    broken: Vec<(Failure, usize)>,
    /// Each job's notebook, as named.
    notebooks: Vec<String>,
}

impl Labs {
    /// Finds and reads the register of every job's folder, each file once.
    pub fn for_jobs(jobs: &[Job]) -> Labs {
        use std::collections::HashMap;
        let mut by_folder: HashMap<PathBuf, Option<PathBuf>> = HashMap::new();
        let mut read: HashMap<PathBuf, Result<std::sync::Arc<pipeline::Lab>, usize>> =
            HashMap::new();
        let mut labs = Labs {
            of_job: Vec::new(),
            broken: Vec::new(),
            notebooks: jobs
                .iter()
                .map(|j| j.notebook.display().to_string())
                .collect(),
        };
        for (j, job) in jobs.iter().enumerate() {
            let Ok(folder) = pipeline::notebook_folder(&job.notebook) else {
                labs.of_job.push(Ok(None));
                continue;
            };
            let found = by_folder
                .entry(folder.clone())
                .or_insert_with(|| pipeline::find_lab(&folder))
                .clone();
            let Some(path) = found else {
                labs.of_job.push(Ok(None));
                continue;
            };
            let slot = read.entry(path.clone()).or_insert_with(|| {
                pipeline::load_lab(&path)
                    .map(std::sync::Arc::new)
                    .map_err(|f| {
                        labs.broken.push((f, j));
                        labs.broken.len() - 1
                    })
            });
            labs.of_job.push(slot.clone().map(Some));
        }
        labs
    }

    /// Runs job `j` with its register.
    fn run(&self, j: usize, job: &Job, force: bool) -> Outcome {
        match self.lab_of(j, &job.notebook, "built") {
            Ok(Some(lab)) => run_job_with(job, force, lab.as_deref()),
            Ok(None) => run_job(job, force),
            Err(f) => Outcome::Failed(f),
        }
    }

    /// The register of job `j` (`Some(None)`: it has none; `None`: not read here). A broken
    /// register fails with its own report for the first job that uses it, and for the others
    /// with a line saying that `notebook` was not `done` and where the report is.
    #[allow(clippy::type_complexity)]
    pub fn lab_of(
        &self,
        j: usize,
        notebook: &Path,
        done: &str,
    ) -> Result<Option<Option<std::sync::Arc<pipeline::Lab>>>, Failure> {
        match self.of_job.get(j) {
            Some(Ok(lab)) => Ok(Some(lab.clone())),
            None => Ok(None),
            Some(Err(b)) => {
                let (f, first) = &self.broken[*b];
                if *first == j {
                    return Err(f.clone());
                }
                Err(Failure::Io {
                    path: notebook.to_path_buf(),
                    message: format!(
                        "not {done}: the lab register {} it uses is broken (reported once, for {})",
                        f.path().display(),
                        self.first_notebook(*first)
                    ),
                })
            }
        }
    }
}

impl Labs {
    fn first_notebook(&self, j: usize) -> String {
        self.notebooks.get(j).cloned().unwrap_or_default()
    }
}

/// [`run_job`] with the lab register already read.
pub fn run_job_with(job: &Job, force: bool, lab: Option<&pipeline::Lab>) -> Outcome {
    let t0 = std::time::Instant::now();
    let raw = match pipeline::read_notebook_bytes(&job.notebook) {
        Ok(r) => r,
        Err(f) => return Outcome::Failed(f),
    };
    let key = build_key_with(&job.notebook, &raw, lab);
    let kp = key_path(&job.output);
    if !force && up_to_date(&job.output, &kp, &key) {
        return Outcome::UpToDate {
            output: job.output.clone(),
        };
    }
    if let Some(parent) = job.output.parent() {
        if !parent.as_os_str().is_empty() {
            if let Err(e) = std::fs::create_dir_all(parent) {
                return Outcome::Failed(Failure::Io {
                    path: parent.to_path_buf(),
                    message: e.to_string(),
                });
            }
        }
    }
    if let Err(f) = pipeline::check_output(&job.output, &[&job.notebook]) {
        return Outcome::Failed(f);
    }
    let pdf = match pipeline::render_file_with(&job.notebook, lab) {
        Ok((_, pdf)) => pdf,
        Err(f) => return Outcome::Failed(f),
    };
    if let Err(e) = pipeline::write_atomic(&job.output, &pdf) {
        return Outcome::Failed(Failure::Io {
            path: job.output.clone(),
            message: e.to_string(),
        });
    }
    // The key is written after the PDF: a crash between the two only costs a rebuild.
    if let Some(d) = kp.parent() {
        let _ = std::fs::create_dir_all(d);
    }
    let _ = pipeline::write_atomic(&kp, key_text(&key, &pdf, &job.output).as_bytes());
    Outcome::Built {
        output: job.output.clone(),
        seconds: t0.elapsed().as_secs_f64(),
    }
}

/// Where an output will be, comparable across spellings: its nearest existing ancestor made
/// canonical, then the rest of the path.
fn output_place(out: &Path) -> PathBuf {
    let abs = std::path::absolute(out).unwrap_or_else(|_| out.to_path_buf());
    let mut rest = Vec::new();
    let mut cur = abs.as_path();
    loop {
        if let Ok(c) = cur.canonicalize() {
            let mut p = c;
            for r in rest.iter().rev() {
                p.push(r);
            }
            return p;
        }
        match (cur.parent(), cur.file_name()) {
            (Some(parent), Some(name)) => {
                rest.push(name.to_os_string());
                cur = parent;
            }
            _ => return abs,
        }
    }
}

/// Checks a plan before anything is written: every output may be written
/// ([`pipeline::check_output`] against all inputs) and no two notebooks write one PDF.
pub fn check_plan(jobs: &[Job]) -> Vec<Failure> {
    let paths: Vec<&Path> = jobs.iter().map(|j| j.notebook.as_path()).collect();
    let inputs = pipeline::Inputs::of(&paths);
    let mut errors = Vec::new();
    let mut seen: std::collections::HashMap<PathBuf, &Path> = std::collections::HashMap::new();
    for j in jobs {
        if let Err(f) = pipeline::check_output_against(&j.output, &inputs) {
            errors.push(f);
            continue;
        }
        match seen.entry(output_place(&j.output)) {
            std::collections::hash_map::Entry::Occupied(first) => errors.push(Failure::Io {
                path: j.output.clone(),
                message: format!(
                    "both {} and {} would be built into this PDF; nothing was written \
                     (build them into different folders, or rename one)",
                    first.get().display(),
                    j.notebook.display()
                ),
            }),
            std::collections::hash_map::Entry::Vacant(v) => {
                v.insert(&j.notebook);
            }
        }
    }
    errors
}

/// Removes what killed builds left in the output folders of `jobs` (and their key folders).
pub fn sweep_output_folders(jobs: &[Job]) {
    let mut dirs: Vec<PathBuf> = jobs
        .iter()
        .filter_map(|j| j.output.parent().map(Path::to_path_buf))
        .map(|d| {
            if d.as_os_str().is_empty() {
                PathBuf::from(".")
            } else {
                d
            }
        })
        .collect();
    dirs.sort();
    dirs.dedup();
    for d in dirs {
        pipeline::sweep_temps(&d);
        pipeline::sweep_temps(&d.join(".benchrec"));
    }
}

/// Runs every job on one worker thread per core; `tick` is called after each one (for a
/// progress bar). The workers are plain threads that take the next job when they finish one:
/// typst runs parts of a compilation on the rayon pool, and a rayon worker waiting for that
/// would steal a further notebook and hold both half-built (measured: 3 GB for 500 records,
/// and per-record times that counted other records). The rayon pool keeps typst's and the
/// Monte Carlo's own parallel work.
pub fn run_all(jobs: &[Job], force: bool, tick: &(dyn Fn(&Job, &Outcome) + Sync)) -> Vec<Outcome> {
    sweep_output_folders(jobs);
    let labs = Labs::for_jobs(jobs);
    // Jobs are told apart by position: the same notebook may be named twice.
    let index = |job: &Job| {
        jobs.iter()
            .position(|j| std::ptr::eq(j, job))
            .unwrap_or(usize::MAX)
    };
    run_all_with(jobs, force, tick, &|job, force| {
        labs.run(index(job), job, force)
    })
}

/// A panic inside one job, as that notebook's failure.
fn panicked(job: &Job, payload: &(dyn std::any::Any + Send)) -> Outcome {
    let what = payload
        .downcast_ref::<&str>()
        .map(|s| s.to_string())
        .or_else(|| payload.downcast_ref::<String>().cloned())
        .unwrap_or_else(|| "no message".into());
    Outcome::Failed(Failure::Io {
        path: job.notebook.clone(),
        message: format!(
            "benchrec stopped on an internal error while building this record ({what}); \
             the other records went on. Please report it with this notebook"
        ),
    })
}

/// [`run_all`] with the job runner given: a panic in one job becomes that job's failure and
/// the workers go on with the rest.
pub fn run_all_with(
    jobs: &[Job],
    force: bool,
    tick: &(dyn Fn(&Job, &Outcome) + Sync),
    runner: &(dyn Fn(&Job, bool) -> Outcome + Sync),
) -> Vec<Outcome> {
    let run = |j: &Job| {
        let o = std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| runner(j, force)))
            .unwrap_or_else(|p| panicked(j, p.as_ref()));
        tick(j, &o);
        o
    };
    let lost = |j: &Job| {
        Outcome::Failed(Failure::Io {
            path: j.notebook.clone(),
            message: "the build worker stopped before this record".into(),
        })
    };
    on_workers(jobs, &run, &lost)
}

/// Stack of each build worker thread.
pub const WORKER_STACK: usize = 16 * 1024 * 1024;

/// `f` over `items` on one plain worker thread per core with [`WORKER_STACK`] (typesetting
/// recurses deeply; rayon's workers have 2 MiB and steal work while typst waits), results in
/// item order. A panic in `f` for one item gives `on_panic` for that item.
pub fn on_workers<T: Sync, R: Send>(
    items: &[T],
    f: &(dyn Fn(&T) -> R + Sync),
    on_panic: &(dyn Fn(&T) -> R + Sync),
) -> Vec<R> {
    // Typesetting recurses deeply: give every thread that may run it the main thread's stack
    // size, not the 2 MiB default. Fails harmlessly when the pool already exists.
    let _ = rayon::ThreadPoolBuilder::new()
        .stack_size(WORKER_STACK)
        .build_global();
    let workers = rayon::current_num_threads().clamp(1, items.len().max(1));
    let next = std::sync::atomic::AtomicUsize::new(0);
    let done: Vec<std::sync::Mutex<Option<R>>> =
        items.iter().map(|_| std::sync::Mutex::new(None)).collect();
    let work = || loop {
        let i = next.fetch_add(1, std::sync::atomic::Ordering::Relaxed);
        let Some(it) = items.get(i) else { break };
        let r = std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| f(it)))
            .unwrap_or_else(|_| on_panic(it));
        if let Ok(mut slot) = done[i].lock() {
            *slot = Some(r);
        }
    };
    std::thread::scope(|sc| {
        let mut spawned = 0;
        for _ in 0..workers {
            let b = std::thread::Builder::new().stack_size(WORKER_STACK);
            if b.spawn_scoped(sc, work).is_ok() {
                spawned += 1;
            }
        }
        if spawned == 0 {
            work();
        }
    });
    done.into_iter()
        .zip(items)
        .map(|(m, it)| {
            m.into_inner()
                .ok()
                .flatten()
                .unwrap_or_else(|| on_panic(it))
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A panic in one job is that job's failure; the other jobs still run (common practice:
    /// one bad input must not stop a batch).
    #[test]
    fn a_panicking_job_fails_alone() {
        let jobs: Vec<Job> = ["a.md", "b.md", "c.md"]
            .iter()
            .map(|n| Job {
                notebook: PathBuf::from(n),
                output: PathBuf::from(n).with_extension("pdf"),
            })
            .collect();
        let runner = |j: &Job, _force: bool| {
            if j.notebook == Path::new("a.md") {
                panic!("invented failure");
            }
            Outcome::UpToDate {
                output: j.output.clone(),
            }
        };
        let out = run_all_with(&jobs, false, &|_, _| {}, &runner);
        assert_eq!(out.len(), 3);
        match &out[0] {
            Outcome::Failed(f) => {
                assert!(f.report().contains("invented failure"), "{}", f.report())
            }
            other => panic!("a.md: {other:?}"),
        }
        assert!(out[1..]
            .iter()
            .all(|o| matches!(o, Outcome::UpToDate { .. })));
    }
}

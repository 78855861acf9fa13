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
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    let mut lines = text.lines();
    if lines.next().map(str::trim_end) != Some("---") {
        return false;
    }
    for line in lines {
        let l = line.trim_end();
        if l == "---" || l == "..." {
            return false;
        }
        if l.starts_with("record:") || l.starts_with("record :") {
            return true;
        }
    }
    false
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
                let is_nb = std::fs::read(path)
                    .map(|b| {
                        looks_like_notebook(&String::from_utf8_lossy(&b[..b.len().min(64 * 1024)]))
                    })
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
/// bytes of every file it names (a user template, images). Missing files hash as absent, so
/// the build itself reports them.
pub fn build_key(notebook_path: &Path, raw: &[u8]) -> String {
    let mut h = Sha256::new();
    h.update(b"benchrec build key 1\0");
    h.update(env!("CARGO_PKG_VERSION").as_bytes());
    h.update(b"\0");
    h.update(render::BUILTIN_TEMPLATE.as_bytes());
    h.update(b"\0");
    h.update(raw);
    let dir = notebook_path.parent().unwrap_or(Path::new(""));
    if let Ok(text) = std::str::from_utf8(raw) {
        if let Ok(nb) = notebook::parse(text) {
            let mut named: Vec<String> = Vec::new();
            if let Some((t, _)) = &nb.front.template {
                named.push(t.clone());
            }
            for item in &nb.items {
                if let notebook::Item::Prose { text, .. } = item {
                    use pulldown_cmark::{Event, Parser, Tag};
                    for ev in Parser::new(&text) {
                        if let Event::Start(Tag::Image { dest_url, .. }) = ev {
                            named.push(dest_url.to_string());
                        }
                    }
                }
            }
            for n in named {
                h.update(b"\0file\0");
                h.update(n.as_bytes());
                h.update(b"\0");
                if let Ok(bytes) = std::fs::read(dir.join(&n)) {
                    h.update(Sha256::digest(&bytes));
                }
            }
        }
    }
    h.finalize().iter().map(|b| format!("{b:02x}")).collect()
}

#[derive(Debug)]
pub enum Outcome {
    Built { output: PathBuf, seconds: f64 },
    UpToDate { output: PathBuf },
    Failed(Failure),
}

/// Builds one job unless its output is up to date (and `force` is off).
pub fn run_job(job: &Job, force: bool) -> Outcome {
    let t0 = std::time::Instant::now();
    let raw = match std::fs::read(&job.notebook) {
        Ok(r) => r,
        Err(e) => {
            return Outcome::Failed(Failure::Io {
                path: job.notebook.clone(),
                message: e.to_string(),
            })
        }
    };
    let key = build_key(&job.notebook, &raw);
    let kp = key_path(&job.output);
    if !force && job.output.is_file() && std::fs::read_to_string(&kp).is_ok_and(|k| k.trim() == key)
    {
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
    match pipeline::build_file(&job.notebook, Some(&job.output)) {
        Ok(output) => {
            // The key is written after the PDF: a crash between the two only costs a rebuild.
            if let Some(d) = kp.parent() {
                let _ = std::fs::create_dir_all(d);
            }
            let _ = pipeline::write_atomic(&kp, key.as_bytes());
            Outcome::Built {
                output,
                seconds: t0.elapsed().as_secs_f64(),
            }
        }
        Err(f) => Outcome::Failed(f),
    }
}

/// Runs every job on one worker thread per core; `tick` is called after each one (for a
/// progress bar). The workers are plain threads that take the next job when they finish one:
/// typst runs parts of a compilation on the rayon pool, and a rayon worker waiting for that
/// would steal a further notebook and hold both half-built (measured: 3 GB for 500 records,
/// and per-record times that counted other records). The rayon pool keeps typst's and the
/// Monte Carlo's own parallel work.
pub fn run_all(jobs: &[Job], force: bool, tick: &(dyn Fn(&Job, &Outcome) + Sync)) -> Vec<Outcome> {
    // Typesetting recurses deeply: give every thread that may run it the main thread's stack
    // size, not the 2 MiB default. Fails harmlessly when the pool already exists.
    let _ = rayon::ThreadPoolBuilder::new()
        .stack_size(WORKER_STACK)
        .build_global();
    let workers = rayon::current_num_threads().clamp(1, jobs.len().max(1));
    let next = std::sync::atomic::AtomicUsize::new(0);
    let done: Vec<std::sync::Mutex<Option<Outcome>>> =
        jobs.iter().map(|_| std::sync::Mutex::new(None)).collect();
    let work = || loop {
        let i = next.fetch_add(1, std::sync::atomic::Ordering::Relaxed);
        let Some(j) = jobs.get(i) else { break };
        let o = run_job(j, force);
        tick(j, &o);
        if let Ok(mut slot) = done[i].lock() {
            *slot = Some(o);
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
        .zip(jobs)
        .map(|(m, j)| {
            m.into_inner().ok().flatten().unwrap_or_else(|| {
                Outcome::Failed(Failure::Io {
                    path: j.notebook.clone(),
                    message: "the build worker stopped before this record".into(),
                })
            })
        })
        .collect()
}

/// Stack of each build worker thread.
pub const WORKER_STACK: usize = 16 * 1024 * 1024;

//! Whole-record benchmark (run with `cargo bench --bench records`): one demo record in a cold
//! process, a generated tree of 1 000 notebooks (3 readings blocks each) built from clean, the
//! same tree rebuilt with nothing changed, verified, and indexed as an archive of 10 000
//! records. Prints wall times and peak memory.

use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Instant;

fn exe() -> PathBuf {
    // cargo bench builds the binary in the same profile folder as this bench.
    let me = std::env::current_exe().expect("bench path");
    let dir = me.parent().and_then(Path::parent).expect("target dir");
    dir.join("benchrec")
}

/// CPU time of this process so far (user and system, all threads), in seconds.
fn self_cpu_s() -> f64 {
    let mut ru: libc::rusage = unsafe { std::mem::zeroed() };
    unsafe { libc::getrusage(libc::RUSAGE_SELF, &mut ru) };
    let t = |v: libc::timeval| v.tv_sec as f64 + v.tv_usec as f64 * 1e-6;
    t(ru.ru_utime) + t(ru.ru_stime)
}

/// Peak resident set of all waited-for children so far, in MiB.
fn children_peak_mib() -> f64 {
    let mut ru: libc::rusage = unsafe { std::mem::zeroed() };
    unsafe { libc::getrusage(libc::RUSAGE_CHILDREN, &mut ru) };
    ru.ru_maxrss as f64 / 1024.0
}

fn run(args: &[&str]) -> f64 {
    let t0 = Instant::now();
    // `-q`: no status lines (they go to standard error); errors still print.
    let st = Command::new(exe())
        .arg("-q")
        .args(args)
        .stdout(std::process::Stdio::null())
        .status()
        .expect("run benchrec");
    let dt = t0.elapsed().as_secs_f64();
    assert!(st.success(), "benchrec {args:?} failed");
    dt
}

fn median(mut v: Vec<f64>) -> f64 {
    v.sort_by(|a, b| a.total_cmp(b));
    v[v.len() / 2]
}

/// A notebook of three RC blocks with invented readings, varied by `i`.
fn notebook(i: usize) -> String {
    let mut s = format!(
        "---\nrecord: BENCH-{i:04}\ntitle: Generated benchmark notebook {i}\ndate: 2026-11-02\noperator: bench\n"
    );
    s.push_str("instruments:\n  meter:\n    accuracy: 0.5% + 3\n    resolution: 1 mV\n");
    s.push_str("parts:\n  R:\n    kind: resistor\n    nominal: 2.2 kohm\n    tolerance: 1%\n");
    s.push_str("  C:\n    kind: capacitor\n    nominal: 68 nF\n    tolerance: 10%\n---\n\n");
    s.push_str(&format!(
        "# Generated {i}\n\nInvented readings for the benchmark.\n\n"
    ));
    for b in 0..3 {
        s.push_str(&format!("```readings\nid: blk{b}\nnetwork: RC\nparts: [R, C]\nmeter: meter\n---\nf/Hz Vs/V VR/V VC/V\n"));
        for (f, vr, vc) in [
            (400.0, 0.528, 1.404),
            (800.0, 0.902, 1.199),
            (1600.0, 1.249, 0.831),
        ] {
            let d = 0.001 * ((i + b) % 7) as f64;
            s.push_str(&format!("{f} 1.500 {:.3} {:.3}\n", vr + d, vc - d));
        }
        s.push_str("```\n\nSome prose between blocks.\n\n");
    }
    s
}

/// Where the time of one record goes, in process: analyse (parse + reduce + judge), template
/// data and plots, typst layout, PDF export. Typst memoises compilation, so each stage is
/// timed once on a record it has not seen; fonts and the library are loaded by a warm-up.
fn stages(demo: &Path) {
    use benchrec::{pipeline, render};
    let src = pipeline::read_source(demo).expect("read");
    let t = Instant::now();
    // With the lab register that applies (the coil demo names its meters by asset id).
    let lab = pipeline::lab_for(demo).expect("lab register");
    let rec = pipeline::analyse_file(&src, lab.as_ref()).expect("analyse");
    let ta = t.elapsed().as_secs_f64();
    // The analysis again, warm: the least of five (it is deterministic, so only noise varies),
    // and the CPU time it takes on all threads, on average.
    let cpu0 = self_cpu_s();
    let again = (0..5)
        .map(|_| {
            let t = Instant::now();
            let _ = pipeline::analyse_file(&src, lab.as_ref()).expect("analyse");
            t.elapsed().as_secs_f64()
        })
        .fold(f64::INFINITY, f64::min);
    let cpu = (self_cpu_s() - cpu0) / 5.0;
    let mut assets = pipeline::gather_assets(&src, &rec).expect("assets");
    assets.source = src.raw.clone();
    let t = Instant::now();
    let _ = render::build_world(&rec, &assets).expect("world");
    let tw = t.elapsed().as_secs_f64();
    let t = Instant::now();
    let _ = render::compile(&rec, &assets).expect("compile");
    let tc = t.elapsed().as_secs_f64();
    let t = Instant::now();
    let _ = render::render_pdf(&rec, &assets).expect("pdf");
    let tp = t.elapsed().as_secs_f64();
    println!(
        "  analyse {:.1} ms (warm, least of 5: {:.1} ms wall, {:.1} ms CPU) | data + plots {:.1} ms | typst layout (incl. data) {:.1} ms | PDF export {:.1} ms",
        ta * 1e3, again * 1e3, cpu * 1e3, tw * 1e3, tc * 1e3, tp * 1e3
    );
}

/// Records in the generated tree (the round's target is 1 000 in 30 s on two cores).
const RECORDS: usize = 1000;

/// Threads the build may use: all the machine's cores.
fn rayon_threads() -> usize {
    std::thread::available_parallelism().map_or(1, |n| n.get())
}

fn main() {
    let demo = Path::new(env!("CARGO_MANIFEST_DIR")).join("demo/snubber-caps.md");
    {
        let warm = tempfile::tempdir().expect("tempdir");
        let nb = warm.path().join("warm.md");
        std::fs::write(&nb, benchrec::starter::starter("WARM", "2026-11-02")).unwrap();
        let t = Instant::now();
        benchrec::pipeline::render_file(&nb).expect("warm-up builds");
        println!(
            "first render in a process (loads embedded fonts and the typst library): {:.3} s",
            t.elapsed().as_secs_f64()
        );
    }
    // `cargo bench --bench records -- demos`: the demo records only.
    let demos_only = std::env::args().any(|a| a == "demos");
    for name in [
        "snubber-caps.md",
        "crossover-coils.md",
        "sensor-tank.md",
        "parallel-tank.md",
    ] {
        println!("stages of demo/{name}:");
        stages(
            &Path::new(env!("CARGO_MANIFEST_DIR"))
                .join("demo")
                .join(name),
        );
    }
    let tmp = tempfile::tempdir().expect("tempdir");
    let out = tmp.path().join("demo.pdf");
    let (d, o) = (demo.to_str().unwrap(), out.to_str().unwrap());
    run(&["build", d, "-o", o, "--force"]); // warm the page cache
    for name in [
        "snubber-caps.md",
        "crossover-coils.md",
        "sensor-tank.md",
        "reel-sample.md",
        "logger-export/logger-sweep.md",
        "capacitor-loss.md",
        "parallel-tank.md",
        "written-model.md",
    ] {
        let nb = Path::new(env!("CARGO_MANIFEST_DIR"))
            .join("demo")
            .join(name);
        let nb = nb.to_str().unwrap();
        let times: Vec<f64> = (0..5)
            .map(|_| run(&["build", nb, "-o", o, "--force"]))
            .collect();
        println!(
            "demo/{name}, cold process: median {:.3} s wall over 5 runs [target ≤ 0.15 s]",
            median(times)
        );
    }
    let times: Vec<f64> = (0..7)
        .map(|_| run(&["build", d, "-o", o, "--force"]))
        .collect();
    println!(
        "demo record, cold process: median {:.3} s wall over 7 runs; peak RSS {:.0} MiB",
        median(times),
        children_peak_mib()
    );
    if demos_only {
        return;
    }

    let tree = tmp.path().join("tree");
    for i in 0..RECORDS {
        let dir = tree.join(format!("lot{:02}", i / 100));
        std::fs::create_dir_all(&dir).unwrap();
        std::fs::write(dir.join(format!("nb{i:03}.md")), notebook(i)).unwrap();
    }
    let signers = sign_tree(&tree, tmp.path());
    let t = tree.to_str().unwrap();
    let full = run(&["build", t]);
    println!("{RECORDS} notebooks x 3 blocks, full build: {full:.2} s wall on {} threads [target ≤ 30 s on 2 cores]", rayon_threads());
    let again: Vec<f64> = (0..5).map(|_| run(&["build", t])).collect();
    println!(
        "{RECORDS} notebooks, nothing changed: median {:.3} s wall",
        median(again)
    );
    let verify: Vec<f64> = (0..1)
        .map(|_| run(&["verify", t, "--signers", signers.to_str().unwrap()]))
        .collect();
    println!(
        "verify DIR of the {RECORDS} signed records (pages read back, each PDF rebuilt and compared): {:.2} s wall",
        median(verify)
    );
    index_scale(&tree);
    println!("peak RSS of any run: {:.0} MiB", children_peak_mib());
}

/// Copies of the tree's records that make the archive [`INDEX_RECORDS`] strong.
const INDEX_RECORDS: usize = 10_000;

/// `index` over an archive of [`INDEX_RECORDS`] record PDFs: the built tree's records, hard
/// linked (copied where links fail) into further folders until there are enough, indexed
/// from nothing and then with nothing changed (targets ≤ 60 s and ≤ 2 s on two cores).
fn index_scale(tree: &Path) {
    let pdfs: Vec<PathBuf> = walkdir::WalkDir::new(tree)
        .into_iter()
        .filter_map(Result::ok)
        .map(|e| e.into_path())
        .filter(|p| p.extension().is_some_and(|x| x == "pdf"))
        .collect();
    assert!(!pdfs.is_empty(), "the tree was built");
    let mut n = pdfs.len();
    let mut copy = 0;
    while n < INDEX_RECORDS {
        copy += 1;
        for p in pdfs.iter().take(INDEX_RECORDS - n) {
            let rel = p.strip_prefix(tree).unwrap();
            let to = tree.join(format!("copy{copy:02}")).join(rel);
            std::fs::create_dir_all(to.parent().unwrap()).unwrap();
            if std::fs::hard_link(p, &to).is_err() {
                std::fs::copy(p, &to).unwrap();
            }
            n += 1;
        }
    }
    let _ = std::fs::remove_dir_all(tree.join(".benchrec"));
    let t = tree.to_str().unwrap();
    let fresh = run(&["index", t]);
    println!("index of {n} record PDFs from nothing: {fresh:.2} s wall [target ≤ 60 s]");
    let again: Vec<f64> = (0..5).map(|_| run(&["index", t])).collect();
    println!(
        "index of {n} record PDFs, nothing changed: median {:.3} s wall [target ≤ 2 s]",
        median(again)
    );
}

/// Signs every notebook under `tree` with a fresh ed25519 key (made by `ssh-keygen`), in
/// process through the library, as `sign` would; returns the allowed-signers file.
fn sign_tree(tree: &Path, tmp: &Path) -> PathBuf {
    use benchrec::signoff::{self, Entry};
    let key = tmp.join("bench_key");
    let st = Command::new("ssh-keygen")
        .args(["-q", "-t", "ed25519", "-N", "", "-C", "bench", "-f"])
        .arg(&key)
        .status()
        .expect("ssh-keygen runs (openssh-client)");
    assert!(st.success());
    let pem = std::fs::read_to_string(&key).unwrap();
    let public = std::fs::read_to_string(key.with_extension("pub")).unwrap();
    let allowed = tmp.join("allowed_signers");
    std::fs::write(&allowed, format!("bench@lab.example {public}")).unwrap();
    for e in walkdir::WalkDir::new(tree)
        .into_iter()
        .filter_map(Result::ok)
    {
        let p = e.path();
        if p.extension().is_none_or(|x| x != "md") {
            continue;
        }
        let raw = std::fs::read_to_string(p).unwrap();
        let nb = benchrec::notebook::parse(&raw).expect("generated notebook parses");
        let digest = signoff::digest(&nb);
        let on = "2026-11-03T10:00:00Z";
        let msg = signoff::key::message(&nb.front.record, &digest, "bench@lab.example", on);
        let (fp, sig) = signoff::key::sign(&pem, &msg).unwrap();
        let entry = Entry {
            by: "bench@lab.example".into(),
            on: on.into(),
            digest,
            key: Some(fp),
            signature: Some(sig),
            accepted: None,
            // The generated notebooks use no lab register.
            register: Vec::new(),
        };
        let signed = signoff::set_signoff(&raw, &entry).unwrap();
        std::fs::write(p, signed).unwrap();
    }
    allowed
}

//! Whole-record benchmark (run with `cargo bench --bench records`): one demo record in a cold
//! process, a generated tree of 500 notebooks (3 readings blocks each) built from clean, and
//! the same tree rebuilt with nothing changed. Prints wall times and peak memory.

use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Instant;

fn exe() -> PathBuf {
    // cargo bench builds the binary in the same profile folder as this bench.
    let me = std::env::current_exe().expect("bench path");
    let dir = me.parent().and_then(Path::parent).expect("target dir");
    dir.join("benchrec")
}

/// Peak resident set of all waited-for children so far, in MiB.
fn children_peak_mib() -> f64 {
    let mut ru: libc::rusage = unsafe { std::mem::zeroed() };
    unsafe { libc::getrusage(libc::RUSAGE_CHILDREN, &mut ru) };
    ru.ru_maxrss as f64 / 1024.0
}

fn run(args: &[&str]) -> f64 {
    let t0 = Instant::now();
    let st = Command::new(exe())
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
        "---\nrecord: BENCH-{i:04}\ntitle: Generated benchmark notebook {i}\ndate: 2026-11-02\noperator: bench\n\
instruments:\n  meter:\n    accuracy: 0.5% + 3\n    resolution: 1 mV\nparts:\n  R:\n    kind: resistor\n    nominal: 2.2 kohm\n    tolerance: 1%\n\
  C:\n    kind: capacitor\n    nominal: 68 nF\n    tolerance: 10%\n---\n\n# Generated {i}\n\nInvented readings for the benchmark.\n\n"
    );
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

/// Where the time of one record goes, in process (fonts and library are loaded by the first
/// render, so it is timed apart): analyse (parse + reduce + judge), data and plots, typst
/// layout, PDF export.
fn stages(demo: &Path) {
    use benchrec::{pipeline, render};
    let t = Instant::now();
    let (_rec, _pdf) = pipeline::render_file(demo).expect("demo builds");
    println!("  first render in this process (loads embedded fonts, typst library): {:.3} s", t.elapsed().as_secs_f64());
    let src = pipeline::read_source(demo).expect("read");
    let n = 15;
    let (mut a, mut g, mut c, mut p) = (vec![], vec![], vec![], vec![]);
    for _ in 0..n {
        let t = Instant::now();
        let rec = pipeline::analyse_text(demo, &src.text).expect("analyse");
        a.push(t.elapsed().as_secs_f64());
        let mut assets = pipeline::gather_assets(&src, &rec).expect("assets");
        assets.source = src.raw.clone();
        let t = Instant::now();
        let _ = render::build_world(&rec, &assets).expect("world");
        g.push(t.elapsed().as_secs_f64());
        let t = Instant::now();
        let _ = render::compile(&rec, &assets).expect("compile");
        c.push(t.elapsed().as_secs_f64());
        let t = Instant::now();
        let _ = render::render_pdf(&rec, &assets).expect("pdf");
        p.push(t.elapsed().as_secs_f64());
    }
    let (ma, mg, mc, mp) = (median(a), median(g), median(c), median(p));
    println!("  analyse (parse, reduce incl. Monte Carlo, judge): {:.1} ms", ma * 1e3);
    println!("  template data and plots (SVG): {:.1} ms", mg * 1e3);
    println!("  typst compile (layout) incl. data: {:.1} ms", mc * 1e3);
    println!("  PDF export alone (render_pdf − compile): {:.1} ms", (mp - mc).max(0.0) * 1e3);
}

fn main() {
    let demo = Path::new(env!("CARGO_MANIFEST_DIR")).join("demo/snubber-caps.md");
    for name in ["snubber-caps.md", "crossover-coils.md", "sensor-tank.md"] {
        println!("stages of demo/{name}, median of 15 in one process:");
        stages(&Path::new(env!("CARGO_MANIFEST_DIR")).join("demo").join(name));
    }
    let tmp = tempfile::tempdir().expect("tempdir");
    let out = tmp.path().join("demo.pdf");
    let (d, o) = (demo.to_str().unwrap(), out.to_str().unwrap());
    run(&["build", d, "-o", o]); // warm the page cache
    let times: Vec<f64> = (0..7).map(|_| run(&["build", d, "-o", o])).collect();
    println!(
        "demo record, cold process: median {:.3} s wall over 7 runs; peak RSS {:.0} MiB",
        median(times),
        children_peak_mib()
    );

    let tree = tmp.path().join("tree");
    for i in 0..500 {
        let dir = tree.join(format!("lot{:02}", i / 50));
        std::fs::create_dir_all(&dir).unwrap();
        std::fs::write(dir.join(format!("nb{i:03}.md")), notebook(i)).unwrap();
    }
    let t = tree.to_str().unwrap();
    let full = run(&["build", t]);
    println!("500 notebooks x 3 blocks, full build: {full:.2} s wall");
    let again: Vec<f64> = (0..5).map(|_| run(&["build", t])).collect();
    println!(
        "500 notebooks, nothing changed: median {:.3} s wall",
        median(again)
    );
    println!("peak RSS of any run: {:.0} MiB", children_peak_mib());
}

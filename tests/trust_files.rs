//! Trust in the archive, files: a build never destroys what it did not write, opens nothing
//! outside the notebook's folder (nor a pipe or a device), refuses inputs that would exhaust
//! the machine, and `check`/`results` accept exactly what `build` accepts. All notebooks here
//! are the invented base notebook of `tests/malformed/ok-minimal.md`, changed as stated.

use std::io::Read;
use std::path::Path;
use std::process::{Command, Output, Stdio};
use std::time::{Duration, Instant};

fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_benchrec"))
}

fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

fn run(args: &[&str]) -> Output {
    run_for(args, Duration::from_secs(60))
}

/// Runs benchrec, killing it after `limit` (a hang is a failure, not a stuck suite).
fn run_for(args: &[&str], limit: Duration) -> Output {
    let mut child = bin()
        .args(args)
        .stdin(Stdio::null())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("benchrec runs");
    let (mut out, mut err) = (child.stdout.take().unwrap(), child.stderr.take().unwrap());
    let t_out = std::thread::spawn(move || {
        let mut b = Vec::new();
        let _ = out.read_to_end(&mut b);
        b
    });
    let t_err = std::thread::spawn(move || {
        let mut b = Vec::new();
        let _ = err.read_to_end(&mut b);
        b
    });
    let t0 = Instant::now();
    let status = loop {
        if let Some(st) = child.try_wait().unwrap() {
            break st;
        }
        if t0.elapsed() > limit {
            let _ = child.kill();
            let _ = child.wait();
            panic!("benchrec {args:?} still running after {limit:?}: killed");
        }
        std::thread::sleep(Duration::from_millis(20));
    };
    Output {
        status,
        stdout: t_out.join().unwrap(),
        stderr: t_err.join().unwrap(),
    }
}

fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

fn stdout(o: &Output) -> String {
    String::from_utf8_lossy(&o.stdout).into_owned()
}

/// The base notebook (invented readings of a 2.2 kΩ / 68 nF pair); it builds.
fn base() -> String {
    std::fs::read_to_string(
        Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/malformed/ok-minimal.md"),
    )
    .unwrap()
}

/// The base notebook with `prose` added as a paragraph before its last one, and `front`
/// lines added to the front matter.
fn notebook(prose: &str, front: &str) -> String {
    let b = base().replacen(
        "operator: T. Tester (synthetic)\n",
        &format!("operator: T. Tester (synthetic)\n{front}"),
        1,
    );
    let out = b.replacen(
        "The block value is",
        &format!("{prose}\n\nThe block value is"),
        1,
    );
    assert!(out.contains(prose), "anchor missing from ok-minimal.md");
    out
}

/// 1-based line of the first occurrence of `needle` in `text`.
fn line_of(text: &str, needle: &str) -> usize {
    text[..text.find(needle).expect("needle")]
        .matches('\n')
        .count()
        + 1
}

/// CRC-32 of PNG chunks (W3C PNG specification, Annex D: polynomial 0xEDB88320).
fn crc32(bytes: &[u8]) -> u32 {
    let mut c = 0xFFFF_FFFFu32;
    for &b in bytes {
        c ^= b as u32;
        for _ in 0..8 {
            c = if c & 1 != 0 {
                0xEDB8_8320 ^ (c >> 1)
            } else {
                c >> 1
            };
        }
    }
    c ^ 0xFFFF_FFFF
}

/// Adler-32 of a zlib stream (RFC 1950, section 8.2).
fn adler32(bytes: &[u8]) -> u32 {
    let (mut a, mut b) = (1u32, 0u32);
    for &x in bytes {
        a = (a + x as u32) % 65521;
        b = (b + a) % 65521;
    }
    (b << 16) | a
}

fn chunk(kind: &[u8; 4], data: &[u8]) -> Vec<u8> {
    let mut c = (data.len() as u32).to_be_bytes().to_vec();
    let mut body = kind.to_vec();
    body.extend_from_slice(data);
    c.extend_from_slice(&body);
    c.extend_from_slice(&crc32(&body).to_be_bytes());
    c
}

/// A PNG (W3C PNG specification, 5.2 signature, 11.2 IHDR: 8-bit RGBA) of `w` × `h` pixels
/// whose IDAT holds `idat` as it stands.
fn png(w: u32, h: u32, idat: &[u8]) -> Vec<u8> {
    let mut p = b"\x89PNG\r\n\x1a\n".to_vec();
    let mut ihdr = w.to_be_bytes().to_vec();
    ihdr.extend_from_slice(&h.to_be_bytes());
    ihdr.extend_from_slice(&[8, 6, 0, 0, 0]);
    p.extend(chunk(b"IHDR", &ihdr));
    p.extend(chunk(b"IDAT", idat));
    p.extend(chunk(b"IEND", &[]));
    p
}

/// A real 1 × 1 PNG: one filter byte and one RGBA pixel in a stored zlib block (RFC 1950/1951).
fn tiny_png() -> Vec<u8> {
    let raw = [0u8, 40, 120, 200, 255];
    let mut z = vec![0x78, 0x01, 0x01, 5, 0, 0xfa, 0xff];
    z.extend_from_slice(&raw);
    z.extend_from_slice(&adler32(&raw).to_be_bytes());
    png(1, 1, &z)
}

/// 40 000 × 40 000 pixels in the header, an empty zlib stream as data: decoding it would
/// need 6.4 GB; the header alone is cheap.
fn huge_png() -> Vec<u8> {
    png(
        40_000,
        40_000,
        &[0x78, 0x9c, 0x03, 0x00, 0x00, 0x00, 0x00, 0x01],
    )
}

fn write(path: &Path, bytes: impl AsRef<[u8]>) {
    if let Some(d) = path.parent() {
        std::fs::create_dir_all(d).unwrap();
    }
    std::fs::write(path, bytes).unwrap();
}

// ---------------------------------------------------------------- nothing lost

/// `-o` naming the notebook itself (directly, through `..`, through a symbolic link) or any
/// existing file that is not a PDF is refused and the file keeps its bytes.
#[test]
fn output_onto_the_notebook_or_a_non_pdf_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let nb = dir.path().join("nb.md");
    write(&nb, base());
    std::fs::create_dir_all(dir.path().join("sub")).unwrap();
    std::os::unix::fs::symlink(&nb, dir.path().join("link.pdf")).unwrap();
    let notes = dir.path().join("notes.txt");
    write(&notes, "bench notes, not a PDF\n");
    let dotdot = dir.path().join("sub/../nb.md");
    for out in [
        nb.clone(),
        dotdot,
        dir.path().join("link.pdf"),
        notes.clone(),
    ] {
        let o = run(&["build", s(&nb), "-o", s(&out)]);
        assert_eq!(
            o.status.code(),
            Some(1),
            "-o {}: {}",
            out.display(),
            stderr(&o)
        );
        assert!(
            stderr(&o).contains("nothing was written"),
            "-o {}: {}",
            out.display(),
            stderr(&o)
        );
    }
    assert_eq!(std::fs::read_to_string(&nb).unwrap(), base());
    assert_eq!(
        std::fs::read_to_string(&notes).unwrap(),
        "bench notes, not a PDF\n"
    );
    // A PDF that is there already is replaced as before.
    let out = dir.path().join("nb-out.pdf");
    let o = run(&["build", s(&nb), "-o", s(&out)]);
    assert!(o.status.success(), "{}", stderr(&o));
    let o = run(&["build", s(&nb), "-o", s(&out)]);
    assert!(o.status.success(), "{}", stderr(&o));
}

/// Two notebooks that would land on one PDF (named files, folders, or a notebook whose PDF
/// is another input) are an error before anything is written.
#[test]
fn two_inputs_onto_one_output_are_refused_before_writing() {
    let dir = tempfile::tempdir().unwrap();
    let (x, y) = (dir.path().join("x/a.md"), dir.path().join("y/a.md"));
    write(&x, base());
    write(&y, base().replacen("HX-0001", "HX-0002", 1));
    let out = dir.path().join("out");
    std::fs::create_dir_all(&out).unwrap();
    let o = run(&["build", s(&x), s(&y), "-o", s(&out)]);
    assert_eq!(o.status.code(), Some(1), "{}", stdout(&o));
    assert!(stderr(&o).contains("both"), "{}", stderr(&o));
    assert!(!out.join("a.pdf").exists(), "a PDF was written");
    // Folders mirrored under one output folder.
    let o = run(&[
        "build",
        s(&dir.path().join("x")),
        s(&dir.path().join("y")),
        "-o",
        s(&out),
    ]);
    assert_eq!(o.status.code(), Some(1), "{}", stdout(&o));
    assert!(!out.join("a.pdf").exists(), "a PDF was written");
    // A notebook saved as `n.pdf` is the output of `n.md`.
    let (n, npdf) = (dir.path().join("n.md"), dir.path().join("n.pdf"));
    write(&n, base());
    write(&npdf, base());
    let o = run(&["build", s(&n), s(&npdf)]);
    assert_eq!(o.status.code(), Some(1), "{}", stdout(&o));
    assert_eq!(std::fs::read_to_string(&npdf).unwrap(), base());
}

/// The pid of a process that has ended.
fn dead_pid() -> u32 {
    let mut c = Command::new("true").spawn().unwrap();
    let pid = c.id();
    c.wait().unwrap();
    pid
}

/// Temporary files of killed builds are removed by the next build of the folder; one a
/// running process writes (here: a live `sleep`) and a fresh old-style one are kept.
#[test]
fn stray_temporary_files_are_swept_but_a_live_writers_file_is_kept() {
    let dir = tempfile::tempdir().unwrap();
    write(&dir.path().join("a.md"), base());
    let mut sleeper = Command::new("sleep").arg("60").spawn().unwrap();
    let dead = dir
        .path()
        .join(format!(".benchrec-p{}-Ab12Cd.tmp", dead_pid()));
    let live = dir
        .path()
        .join(format!(".benchrec-p{}-Ef34Gh.tmp", sleeper.id()));
    let old = dir.path().join(".benchrec-Xy9Zk1.tmp");
    let fresh = dir.path().join(".benchrec-Qr7St2.tmp");
    for p in [&dead, &live, &old, &fresh] {
        write(p, b"%PDF-1.7 partial");
    }
    let hour_ago = std::time::SystemTime::now() - Duration::from_secs(3600);
    std::fs::File::options()
        .write(true)
        .open(&old)
        .unwrap()
        .set_modified(hour_ago)
        .unwrap();
    let o = run(&["build", s(dir.path())]);
    let _ = sleeper.kill();
    let _ = sleeper.wait();
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(!dead.exists(), "a dead writer's file was left");
    assert!(!old.exists(), "an hour-old temporary file was left");
    assert!(live.exists(), "a live writer's file was removed");
    assert!(fresh.exists(), "a fresh old-style file was removed");
}

/// A PDF truncated or altered on disk is not "up to date": the key records the PDF's size
/// and SHA-256 and the next build rebuilds it.
#[test]
fn a_truncated_or_altered_pdf_is_rebuilt() {
    let dir = tempfile::tempdir().unwrap();
    write(&dir.path().join("a.md"), base());
    let pdf = dir.path().join("a.pdf");
    let o = run(&["build", s(dir.path())]);
    assert!(o.status.success(), "{}", stderr(&o));
    let good = std::fs::read(&pdf).unwrap();
    let o = run(&["build", s(dir.path())]);
    assert!(stderr(&o).starts_with("up to date"), "{}", stderr(&o));
    std::fs::write(&pdf, &good[..good.len() / 2]).unwrap();
    let o = run(&["build", s(dir.path())]);
    assert!(stderr(&o).starts_with("built"), "{}", stderr(&o));
    assert_eq!(std::fs::read(&pdf).unwrap(), good);
    let mut bad = good.clone();
    let mid = bad.len() / 2;
    bad[mid] ^= 0x20;
    std::fs::write(&pdf, &bad).unwrap();
    let o = run(&["build", s(dir.path())]);
    assert!(stderr(&o).starts_with("built"), "{}", stderr(&o));
    assert_eq!(std::fs::read(&pdf).unwrap(), good);
}

/// Standard output on a full device (Linux `/dev/full`: every write fails with ENOSPC):
/// one line on standard error, exit 1, for results and check. `build` writes its status lines
/// to standard error, best effort: with both streams full it still writes the PDF, exit 0.
#[test]
fn stdout_on_a_full_device_is_one_line_and_exit_1() {
    if !Path::new("/dev/full").exists() {
        assert!(std::env::var("CI").is_err(), "/dev/full missing in CI");
        eprintln!("/dev/full missing here; skipped");
        return;
    }
    let dir = tempfile::tempdir().unwrap();
    let nb = dir.path().join("nb.md");
    write(&nb, base());
    let full = || {
        std::fs::File::options()
            .write(true)
            .open("/dev/full")
            .unwrap()
    };
    let o = bin()
        .args(["build", s(&nb)])
        .stdout(full())
        .stderr(full())
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(0));
    assert!(dir.path().join("nb.pdf").is_file());
    for args in [vec!["results", s(&nb)], vec!["check", s(&nb)]] {
        let full = std::fs::File::options()
            .write(true)
            .open("/dev/full")
            .unwrap();
        let o = bin().args(&args).stdout(full).output().unwrap();
        let err = stderr(&o);
        assert_eq!(o.status.code(), Some(1), "{args:?}: {err}");
        assert_eq!(err.lines().count(), 1, "{args:?}: {err}");
        assert!(err.contains("standard output"), "{args:?}: {err}");
    }
}

/// Standard output closed by the reader (as `| head -c1` does) ends the process quietly.
#[test]
fn a_closed_pipe_stays_quiet() {
    let dir = tempfile::tempdir().unwrap();
    let nb = dir.path().join("nb.md");
    write(&nb, base());
    // `build` writes only status lines, on standard error: it has nothing for the pipe.
    for verb in ["results", "check"] {
        let mut child = bin()
            .args([verb, s(&nb)])
            .stdout(Stdio::piped())
            .stderr(Stdio::piped())
            .spawn()
            .unwrap();
        let mut out = child.stdout.take().unwrap();
        let mut one = [0u8; 1];
        let _ = out.read(&mut one);
        drop(out);
        let o = child.wait_with_output().unwrap();
        assert!(
            stderr(&o).is_empty(),
            "{verb} | head -c1 wrote: {}",
            stderr(&o)
        );
    }
}

// ------------------------------------------------- nothing read outside, nothing exhausted

/// Under strace, a notebook naming `../secret.txt` as an image (also through a link inside
/// the folder) and `../secret.typ` as template is refused and neither file is ever opened,
/// by build, check or results.
#[test]
fn named_files_outside_are_refused_before_any_open_under_strace() {
    let have = Command::new("strace")
        .arg("-V")
        .output()
        .is_ok_and(|o| o.status.success());
    if !have {
        assert!(
            std::env::var("CI").is_err(),
            "strace is not installed: this check must run in CI"
        );
        eprintln!("strace is not installed here; skipped");
        return;
    }
    let root = tempfile::tempdir().unwrap();
    write(&root.path().join("secret.txt"), "SECRET-OUTSIDE\n");
    write(&root.path().join("secret.typ"), "SECRET-OUTSIDE\n");
    let dir = root.path().join("nb");
    std::fs::create_dir_all(&dir).unwrap();
    std::os::unix::fs::symlink(root.path().join("secret.txt"), dir.join("link.png")).unwrap();
    let nb = dir.join("nb.md");
    write(
        &nb,
        notebook(
            "![a](../secret.txt) ![b](link.png)",
            "template: ../secret.typ\n",
        ),
    );
    let log = root.path().join("trace.log");
    for verb in ["build", "check", "results"] {
        let o = Command::new("strace")
            .args([
                "-f",
                "-qq",
                "-e",
                "trace=open,openat,openat2",
                "-o",
                s(&log),
            ])
            .arg(env!("CARGO_BIN_EXE_benchrec"))
            .args([verb, s(&nb)])
            .output()
            .unwrap();
        let trace = std::fs::read_to_string(&log).unwrap_or_default();
        assert!(
            trace.contains("nb.md"),
            "strace logged no open of the notebook: {}",
            String::from_utf8_lossy(&o.stderr)
        );
        assert_eq!(o.status.code(), Some(1), "{verb} accepted the notebook");
        let hits: Vec<&str> = trace.lines().filter(|l| l.contains("secret")).collect();
        assert!(hits.is_empty(), "{verb} opened:\n{}", hits.join("\n"));
        assert!(
            stderr(&o).contains("outside the notebook's folder"),
            "{}",
            stderr(&o)
        );
    }
}

/// A named pipe as an image or as the notebook is refused at once (it used to hang).
#[test]
fn a_fifo_as_image_or_notebook_is_refused_without_hanging() {
    let dir = tempfile::tempdir().unwrap();
    let fifo = dir.path().join("pipe.png");
    let nbfifo = dir.path().join("pipe.md");
    for f in [&fifo, &nbfifo] {
        let st = Command::new("mkfifo").arg(f).status().unwrap();
        assert!(st.success(), "mkfifo");
    }
    let nb = dir.path().join("nb.md");
    let text = notebook("![pipe](pipe.png)", "");
    write(&nb, &text);
    let limit = Duration::from_secs(30);
    for verb in ["build", "check", "results"] {
        let o = run_for(&[verb, s(&nb)], limit);
        assert_eq!(o.status.code(), Some(1), "{verb}: {}", stderr(&o));
        let want = format!("nb.md:{}:", line_of(&text, "![pipe]"));
        assert!(
            stderr(&o).contains(&want) && stderr(&o).contains("named pipe"),
            "{verb}: {}",
            stderr(&o)
        );
        let o = run_for(&[verb, s(&nbfifo)], limit);
        assert_eq!(o.status.code(), Some(1), "{verb}: {}", stderr(&o));
        assert!(stderr(&o).contains("named pipe"), "{verb}: {}", stderr(&o));
    }
}

/// A notebook that is a link to `/dev/zero` is refused from its metadata, not read.
#[test]
fn a_notebook_linked_to_a_device_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let nb = dir.path().join("zero.md");
    std::os::unix::fs::symlink("/dev/zero", &nb).unwrap();
    let o = run_for(&["check", s(&nb)], Duration::from_secs(30));
    assert_eq!(o.status.code(), Some(1));
    assert!(stderr(&o).contains("a device"), "{}", stderr(&o));
}

/// A 40 000 × 40 000 PNG header is refused at its line from the header alone (the limit is
/// 50 megapixels), and in a folder the notebooks after it still build.
#[test]
fn a_huge_image_is_refused_from_its_header_and_the_batch_goes_on() {
    let dir = tempfile::tempdir().unwrap();
    write(&dir.path().join("huge.png"), huge_png());
    let text = notebook("![huge](huge.png)", "");
    write(&dir.path().join("a-huge.md"), &text);
    for n in 1..=4 {
        let t = base().replacen("HX-0001", &format!("HX-010{n}"), 1);
        write(&dir.path().join(format!("b-good-{n}.md")), t);
    }
    let o = run_for(&["build", s(dir.path())], Duration::from_secs(120));
    assert_eq!(o.status.code(), Some(1), "{}", stderr(&o));
    let want = format!("a-huge.md:{}:", line_of(&text, "![huge]"));
    assert!(
        stderr(&o).contains(&want) && stderr(&o).contains("megapixels"),
        "{}",
        stderr(&o)
    );
    assert!(stderr(&o).contains("4 built"), "{}", stderr(&o));
    for n in 1..=4 {
        assert!(dir.path().join(format!("b-good-{n}.pdf")).is_file());
    }
}

/// A 12 MB paragraph is refused at its line with the limit named, quickly; many ordinary
/// paragraphs beyond the prose limit too. (Typesetting such prose took 3.7 GB and 20 s.)
#[test]
fn huge_prose_is_refused_at_its_line_with_the_limit() {
    let dir = tempfile::tempdir().unwrap();
    let line = "word ".repeat(12 * 1024 * 1024 / 5);
    let text = notebook(&line, "");
    let nb = dir.path().join("long.md");
    write(&nb, &text);
    let t0 = Instant::now();
    let o = run_for(&["build", s(&nb)], Duration::from_secs(60));
    let took = t0.elapsed();
    assert_eq!(o.status.code(), Some(1), "{}", stderr(&o));
    let want = format!("long.md:{}:1", line_of(&text, "word word"));
    assert!(
        stderr(&o).contains(&want) && stderr(&o).contains("32 KiB"),
        "{}",
        stderr(&o)
    );
    eprintln!("12 MB paragraph refused in {:.2} s", took.as_secs_f64());
    let paras = "An ordinary sentence of bench notes, typed as the work goes on.\n\n"
        .repeat(12 * 1024 * 1024 / 66);
    let text = notebook(&paras, "");
    write(&nb, &text);
    let o = run_for(&["build", s(&nb)], Duration::from_secs(60));
    assert_eq!(o.status.code(), Some(1), "{}", stderr(&o));
    assert!(stderr(&o).contains("512 KiB"), "{}", stderr(&o));
}

/// Notebooks that `build` refuses for what they name or for typesetting; `check` and
/// `results` must refuse each one too (and accept the good one), with the same exit code.
#[test]
fn check_and_results_succeed_exactly_when_build_does() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    write(&d.join("tiny.png"), tiny_png());
    write(&d.join("huge.png"), huge_png());
    write(&d.join("text.png"), "not an image at all\n");
    let mut bmp = b"BM".to_vec();
    bmp.extend_from_slice(&[0u8; 60]);
    write(&d.join("old.bmp"), bmp);
    write(&d.join("bad.svg"), [0xffu8, 0xfe, 0x00, 0x3c]);
    // A valid header of 4 × 4 pixels over a data stream that is not zlib.
    write(
        &d.join("broken.png"),
        png(4, 4, b"not a zlib stream at all"),
    );
    write(&d.join("broken.typ"), "#let x = (\n");
    write(&d.join("latin1.typ"), [0x23u8, 0x6c, 0xe9, 0x0a]);
    let cases: Vec<(&str, String)> = vec![
        ("good", notebook("![tiny](tiny.png)", "")),
        ("huge", notebook("![huge](huge.png)", "")),
        ("text", notebook("![t](text.png)", "")),
        ("bmp", notebook("![b](old.bmp)", "")),
        ("svg", notebook("![s](bad.svg)", "")),
        ("broken", notebook("![b](broken.png)", "")),
        ("missing-image", notebook("![m](gone.png)", "")),
        ("template-missing", notebook("", "template: gone.typ\n")),
        ("template-broken", notebook("", "template: broken.typ\n")),
        ("template-latin1", notebook("", "template: latin1.typ\n")),
        ("paragraph", notebook(&"x".repeat(40 * 1024), "")),
    ];
    for (name, text) in &cases {
        let nb = d.join(format!("{name}.md"));
        write(&nb, text);
        let out = d.join(format!("{name}.pdf"));
        let b = run(&["build", s(&nb), "-o", s(&out)]).status.code();
        let c = run(&["check", s(&nb)]).status.code();
        let r = run(&["results", s(&nb)]).status.code();
        assert_eq!(
            b,
            Some(if *name == "good" { 0 } else { 1 }),
            "{name}: build"
        );
        assert_eq!(c, b, "{name}: check exit differs from build");
        assert_eq!(r, b, "{name}: results exit differs from build");
    }
}

/// A typesetting error caused by an image the notebook names (a PNG whose header is fine
/// but whose data does not decode) is reported at the notebook line of the image, not at
/// a generated file, and does not blame the built-in template.
#[test]
fn typesetting_errors_point_at_the_notebook_line() {
    let dir = tempfile::tempdir().unwrap();
    write(
        &dir.path().join("broken.png"),
        png(4, 4, b"not a zlib stream at all"),
    );
    let text = notebook("Before it.\n\n![scope trace](broken.png)", "");
    let nb = dir.path().join("nb.md");
    write(&nb, &text);
    let o = run(&["build", s(&nb)]);
    let err = stderr(&o);
    assert_eq!(o.status.code(), Some(1), "{err}");
    let want = format!("nb.md:{}:1", line_of(&text, "![scope trace]"));
    assert!(
        err.contains(&want),
        "not at the notebook line {want}:\n{err}"
    );
    assert!(err.contains("broken.png"), "{err}");
    assert!(!err.contains("generated"), "{err}");
    assert!(!err.contains("defect"), "{err}");
}

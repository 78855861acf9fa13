//! Readings from a file (FORMAT.md 1.1, `table:`) through the real binary: the same readings
//! reduce to the same results, to the last bit, typed in the notebook or read from a CSV or TSV
//! file; the file is attached to the PDF, counts in the sign-off digest and in the build key;
//! a file outside the folder is refused, through a link too.
//!
//! The readings are synthetic (invented parts, no bench): a series RC pair driven at 2 V,
//! computed by complex arithmetic from R1 = 2.2 kΩ and C1 = 68 nF (the parts of
//! `common::synthetic_front`): I = Vs / (R − j/(ωC)), VR = |I|·R, VC = |I|/(ωC).

mod common;

use common::*;
use num_complex::Complex64;
use std::path::Path;

const R: f64 = 2200.0;
const C: f64 = 68e-9;
const FREQS: [f64; 5] = [300.0, 700.0, 1100.0, 2400.0, 5000.0];

/// (f, VR, VC) of the synthetic pair, printed to nine decimals.
fn readings() -> Vec<(String, String, String)> {
    FREQS
        .iter()
        .map(|&f| {
            let w = 2.0 * std::f64::consts::PI * f;
            let z = Complex64::new(R, -1.0 / (w * C));
            let i = Complex64::new(2.0, 0.0) / z;
            let vr = i * R;
            let vc = i * Complex64::new(0.0, -1.0 / (w * C));
            (
                format!("{f}"),
                format!("{:.9}", vr.norm()),
                format!("{:.9}", vc.norm()),
            )
        })
        .collect()
}

/// The synthetic front matter with a frequency counter, so no column lacks an instrument and
/// the results carry no flag that names a line.
fn front() -> String {
    synthetic_front("TF-0001", "Readings from a file", "2026-10-12").replace(
        "instruments:\n",
        "instruments:\n  fc:\n    what: frequency counter\n    accuracy: 0.01%\n    resolution: 1 Hz\n",
    )
}

fn block(header: &str, table: &str) -> String {
    format!(
        "{}Invented readings of a series pair.\n\n```readings\nid: sweep\nnetwork: RC\nparts: [R1, C1]\nmeter: dmm\ncounter: fc\n{header}{table}```\n\nThe block value is `=sweep.C`.\n",
        front()
    )
}

fn inline_notebook() -> String {
    let mut t = String::from("---\nf/Hz  VR/V  VC/V\n");
    for (f, vr, vc) in readings() {
        t.push_str(&format!("{f}  {vr}  {vc}\n"));
    }
    block("", &t)
}

/// A scope-style export: BOM, two preamble lines, CRLF, `;` with decimal commas, quoted
/// fields, the file's own headings (mapped), a column we do not read, a trailing empty line.
fn scope_csv() -> String {
    let mut t = String::from("\u{feff}Bench PC export (invented)\r\nunit: V\r\n");
    t.push_str("Frequency;\"CH1; RMS [V]\";CH2 RMS [V];Notes\r\n");
    for (f, vr, vc) in readings() {
        let comma = |s: &str| s.replace('.', ",");
        t.push_str(&format!("{f};{};\"{}\";ok\r\n", comma(&vr), comma(&vc)));
    }
    t.push_str("\r\n");
    t
}

const SCOPE_HEADER: &str = "table: data/sweep.csv\ndelimiter: \";\"\ndecimal: comma\nskip: 2\ncolumns:\n  f/Hz: Frequency\n  VR/V: \"CH1; RMS [V]\"\n  VC/V: CH2 RMS [V]\n";

fn tsv() -> String {
    let mut t = String::from("f/Hz\tVR (V)\tVC/V\n");
    for (f, vr, vc) in readings() {
        t.push_str(&format!("{f}\t{vr}\t{vc}\n"));
    }
    t
}

fn write(dir: &Path, rel: &str, text: &str) -> std::path::PathBuf {
    let p = dir.join(rel);
    std::fs::create_dir_all(p.parent().unwrap()).unwrap();
    std::fs::write(&p, text).unwrap();
    p
}

#[test]
fn readings_from_a_file_reduce_as_readings_typed_in() {
    let dir = tempfile::tempdir().unwrap();
    let inline = write(dir.path(), "inline.md", &inline_notebook());
    let scope = write(dir.path(), "scope.md", &block(SCOPE_HEADER, ""));
    write(dir.path(), "data/sweep.csv", &scope_csv());
    let a = run(&["results", s(&inline)]);
    assert!(a.status.success(), "{}", stderr(&a));
    let b = run(&["results", s(&scope)]);
    assert!(b.status.success(), "{}", stderr(&b));
    // Same readings, same JSON: every result to the last bit (serde_json prints the shortest
    // text that round-trips an f64).
    assert_eq!(stdout(&a), stdout(&b));
    let j = results_json(&scope);
    // No flag stands at a row (it would name the file there and the notebook here): the only
    // one is the block's consistency note, at the block in both notebooks.
    let flags = j["blocks"][0]["flags"].as_array().unwrap();
    assert!(
        flags.iter().all(|f| !f.to_string().contains("sweep.csv")),
        "{flags:?}"
    );
    // The readings were made from C = 68 nF; the block value gives it back (to the nine
    // decimals the readings are printed with).
    let c = block_value(&j, "C");
    assert!((c / C - 1.0).abs() < 1e-7, "C = {c}");

    // A TSV file with our own headings (delimiter from the extension; the fence holds the
    // header alone, no `---`): the same JSON again.
    let tsv_nb = write(dir.path(), "tsv.md", &block("table: sweep.tsv\n", ""));
    write(dir.path(), "sweep.tsv", &tsv());
    let t = run(&["results", s(&tsv_nb)]);
    assert!(t.status.success(), "{}", stderr(&t));
    assert_eq!(stdout(&t), stdout(&a));
}

#[test]
fn the_table_file_is_attached_and_counts_in_the_digest() {
    let dir = tempfile::tempdir().unwrap();
    let nb = write(dir.path(), "scope.md", &block(SCOPE_HEADER, ""));
    let csv = write(dir.path(), "data/sweep.csv", &scope_csv());
    let o = run(&["build", s(&nb)]);
    assert!(o.status.success(), "{}", stderr(&o));
    let pdf = std::fs::read(nb.with_extension("pdf")).unwrap();
    let files = benchrec::signoff::pdf_attachments(&pdf).unwrap();
    let names: Vec<&str> = files.iter().map(|(n, _)| n.as_str()).collect();
    assert!(names.contains(&"scope.md"), "{names:?}");
    let table = files.iter().find(|(n, _)| n == "data_sweep.csv");
    assert_eq!(
        table.map(|t| &t.1[..]),
        Some(&std::fs::read(&csv).unwrap()[..]),
        "the table file is attached byte for byte, BOM and CRLF kept: {names:?}"
    );

    let o = run(&["sign", s(&nb), "--by", "T. Tester"]);
    assert!(o.status.success(), "{}", stderr(&o));
    let v = run(&["verify", s(&nb)]);
    assert!(stdout(&v).contains("the digest matches"), "{}", stdout(&v));
    // The PDF verifies from its own attachments (the notebook and the table beside it).
    let v = run(&["verify", s(&nb.with_extension("pdf"))]);
    assert!(
        stdout(&v).contains("the digest matches"),
        "{}{}",
        stdout(&v),
        stderr(&v)
    );
    // One reading changed in the file, nothing in the notebook: the sign-off is void.
    let text = std::fs::read_to_string(&csv).unwrap();
    assert!(text.contains("\r\n700;"));
    std::fs::write(&csv, text.replace("\r\n700;", "\r\n710;")).unwrap();
    let v = run(&["verify", s(&nb)]);
    assert!(stdout(&v).contains("void"), "{}{}", stdout(&v), stderr(&v));
}

#[test]
fn a_folder_build_rebuilds_when_only_the_table_file_changes() {
    let dir = tempfile::tempdir().unwrap();
    write(dir.path(), "scope.md", &block(SCOPE_HEADER, ""));
    let csv = write(dir.path(), "data/sweep.csv", &scope_csv());
    let d = s(dir.path());
    let o = run(&["build", d]);
    assert!(
        stderr(&o).contains("built "),
        "{}{}",
        stderr(&o),
        stderr(&o)
    );
    let o = run(&["build", d]);
    assert!(stderr(&o).contains("up to date"), "{}", stderr(&o));
    std::fs::write(&csv, scope_csv().replace(";ok", ";checked")).unwrap();
    let o = run(&["build", d]);
    assert!(
        stderr(&o).contains("built ") && !stderr(&o).contains("up to date"),
        "{}",
        stderr(&o)
    );
}

#[test]
fn a_table_file_outside_the_folder_is_refused_even_through_a_link() {
    let root = tempfile::tempdir().unwrap();
    let outside = write(
        root.path(),
        "elsewhere/sweep.csv",
        &tsv().replace('\t', ","),
    );
    let dir = root.path().join("nb");
    std::fs::create_dir(&dir).unwrap();
    let nb = write(&dir, "nb.md", &block("table: link.csv\n", ""));
    #[cfg(unix)]
    std::os::unix::fs::symlink(&outside, dir.join("link.csv")).unwrap();
    let o = run(&["build", s(&nb)]);
    assert_eq!(o.status.code(), Some(1));
    let err = stderr(&o);
    assert!(
        err.contains(
            "table file `link.csv` resolves (through a link) outside the notebook's folder"
        ),
        "{err}"
    );
    assert!(!nb.with_extension("pdf").exists());
}

#[test]
fn a_flag_on_a_row_of_the_file_names_the_file_line_and_column() {
    // `source: 2 V` with a Vs column whose fourth reading departs from it by 5 %: the flag
    // stands at that row of the file (line 5: the header, then rows 1..4).
    let dir = tempfile::tempdir().unwrap();
    let mut t = String::from("f/Hz,Vs/V,VR/V,VC/V\n");
    for (k, (f, vr, vc)) in readings().into_iter().enumerate() {
        let vs = if k == 3 { "2.1" } else { "2.0" };
        t.push_str(&format!("{f},{vs},{vr},{vc}\n"));
    }
    write(dir.path(), "sweep.csv", &t);
    let nb = write(
        dir.path(),
        "nb.md",
        &block("source: 2 V\ntable: sweep.csv\n", ""),
    );
    let o = run(&["check", "--verbose", s(&nb)]);
    let out = stdout(&o);
    let want = format!("{}:5:1:", dir.path().join("sweep.csv").display());
    assert!(
        out.contains(&want),
        "no flag at {want}:\n{out}{}",
        stderr(&o)
    );
}

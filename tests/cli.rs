//! End-to-end tests through the `benchrec` binary: build, check, results, sign, verify,
//! batches, cache, watch, exit codes.

mod common;

use common::*;
use std::path::{Path, PathBuf};

/// Copies a demo notebook into a fresh temporary folder.
fn copy_demo(name: &str) -> (tempfile::TempDir, PathBuf) {
    let dir = tempfile::tempdir().unwrap();
    let dst = dir.path().join(name);
    std::fs::copy(demo(name), &dst).unwrap();
    (dir, dst)
}

/// A capacitance and its expanded uncertainty printed by GUM 7.2.6 as written here, apart
/// from the tool's own printer: U to two significant digits, the value to the same decimal
/// place, an SI prefix that puts the value in [1, 1000) (ISO 80000-1), `(v ± U) unit`.
fn gum_726_farad(value: f64, expanded: f64) -> String {
    let (div, prefix) = [
        (1e-12, "p"),
        (1e-9, "n"),
        (1e-6, "µ"),
        (1e-3, "m"),
        (1.0, ""),
    ]
    .into_iter()
    .rev()
    .find(|(d, _)| value.abs() / d >= 1.0)
    .unwrap_or((1e-12, "p"));
    let (v, u) = (value / div, expanded / div);
    let mut e = u.log10().floor() as i32;
    let step = 10f64.powi(e - 1);
    if (u / step).round() * step >= 10f64.powi(e + 1) {
        e += 1;
    }
    let dec = (1 - e).max(0) as usize;
    format!("({v:.dec$} ± {u:.dec$}) {prefix}F")
}

#[test]
fn demo_builds_and_its_pdf_shows_record_blocks_and_a_computed_value() {
    let (dir, nb) = copy_demo("snubber-caps.md");
    let out = dir.path().join("rec.pdf");
    let o = run(&["build", nb.to_str().unwrap(), "-o", out.to_str().unwrap()]);
    assert!(o.status.success(), "build failed: {}", stderr(&o));
    let text = squash(&pdf_text_file(&out));
    assert!(text.contains("BR-DEMO-0101"), "record id missing");
    assert!(
        text.contains("snub-c1") && text.contains("snub-pair-z"),
        "block ids missing"
    );
    // The block C as the results export gives it, printed by GUM 7.2.6 (independently here).
    let json: serde_json::Value =
        serde_json::from_str(&stdout(&run(&["results", nb.to_str().unwrap()]))).unwrap();
    let c = json["blocks"][0]["results"]
        .as_array()
        .unwrap()
        .iter()
        .find(|r| r["name"] == "C" && r.get("f").is_none())
        .expect("block C")
        .clone();
    let printed = gum_726_farad(c["value"].as_f64().unwrap(), c["U"].as_f64().unwrap());
    assert!(
        text.contains(&squash(&printed)),
        "computed C `{printed}` not in the PDF text"
    );
    // Plot labels are set as text over the drawing, so they are in the text layer too.
    assert!(
        text.contains("φ/°") && text.contains("φmeasured"),
        "plot labels missing"
    );
}

#[test]
fn default_output_lands_beside_the_notebook() {
    let (dir, nb) = copy_demo("snubber-caps.md");
    let o = run(&["build", nb.to_str().unwrap()]);
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(dir.path().join("snubber-caps.pdf").is_file());
}

#[test]
fn two_builds_are_byte_identical_and_declare_pdfa3b_with_the_source_attached() {
    let (dir, nb) = copy_demo("snubber-caps.md");
    let a = dir.path().join("a.pdf");
    let b = dir.path().join("b.pdf");
    for out in [&a, &b] {
        let o = run(&["build", nb.to_str().unwrap(), "-o", out.to_str().unwrap()]);
        assert!(o.status.success(), "{}", stderr(&o));
    }
    let (pa, pb) = (std::fs::read(&a).unwrap(), std::fs::read(&b).unwrap());
    assert!(pa == pb, "two builds of one notebook differ");
    // PDF/A identification lives in the XMP packet (ISO 19005-3 §6.6.4): part 3, conformance B.
    let s = String::from_utf8_lossy(&pa);
    let xmp_part = s.contains("<pdfaid:part>3</pdfaid:part>") || s.contains("pdfaid:part=\"3\"");
    let xmp_conf = s.contains("<pdfaid:conformance>B</pdfaid:conformance>")
        || s.contains("pdfaid:conformance=\"B\"");
    assert!(xmp_part && xmp_conf, "XMP does not declare PDF/A-3b");
    let files = benchrec::signoff::pdf_attachments(&pa).unwrap();
    assert_eq!(files.len(), 2, "the notebook and the summary expected");
    let md = files
        .iter()
        .find(|(n, _)| n.ends_with(".md"))
        .expect("notebook attached");
    assert!(files.iter().any(|(n, _)| n == "benchrec-summary.json"));
    assert_eq!(
        md.1,
        std::fs::read(&nb).unwrap(),
        "attachment differs from the notebook bytes"
    );
}

#[test]
fn a_bad_notebook_exits_1_names_file_line_column_and_leaves_the_old_pdf() {
    let (dir, nb) = copy_demo("snubber-caps.md");
    let o = run(&["build", nb.to_str().unwrap()]);
    assert!(o.status.success(), "{}", stderr(&o));
    let pdf = dir.path().join("snubber-caps.pdf");
    let before = std::fs::read(&pdf).unwrap();
    let text = std::fs::read_to_string(&nb).unwrap();
    let broken = text.replacen("1.965", "1.9x5", 1);
    std::fs::write(&nb, &broken).unwrap();
    let line = broken.lines().position(|l| l.contains("1.9x5")).unwrap() + 1;
    let o = run(&["build", nb.to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(1));
    let err = stderr(&o);
    assert!(
        err.contains(&format!("snubber-caps.md:{line}:")),
        "no file:line in {err}"
    );
    assert_eq!(
        std::fs::read(&pdf).unwrap(),
        before,
        "the earlier PDF was touched"
    );
    let leftovers: Vec<_> = std::fs::read_dir(dir.path())
        .unwrap()
        .flatten()
        .filter(|e| e.file_name().to_string_lossy().ends_with(".tmp"))
        .collect();
    assert!(leftovers.is_empty(), "temporary files left behind");
}

#[test]
fn usage_errors_exit_2_and_every_verb_has_help() {
    assert_eq!(run(&["build"]).status.code(), Some(2));
    assert_eq!(run(&["no-such-verb"]).status.code(), Some(2));
    for verb in VERBS {
        let o = run(&[verb, "--help"]);
        assert!(o.status.success(), "{verb} --help failed");
        assert!(
            stdout(&o).contains("Usage"),
            "{verb} --help prints no usage"
        );
    }
}

#[test]
fn check_writes_nothing() {
    let (dir, nb) = copy_demo("snubber-caps.md");
    let o = run(&["check", nb.to_str().unwrap()]);
    assert!(o.status.success(), "{}", stderr(&o));
    let n = std::fs::read_dir(dir.path()).unwrap().count();
    assert_eq!(n, 1, "check wrote a file");
}

/// Runs `results` and returns (name, f, value) triples.
fn result_values(nb: &Path) -> Vec<(String, Option<f64>, f64)> {
    let o = run(&["results", nb.to_str().unwrap()]);
    assert!(o.status.success(), "{}", stderr(&o));
    let json: serde_json::Value = serde_json::from_str(&stdout(&o)).unwrap();
    let mut out = Vec::new();
    for b in json["blocks"].as_array().unwrap() {
        for r in b["results"].as_array().unwrap() {
            out.push((
                format!(
                    "{}/{}",
                    b["id"].as_str().unwrap(),
                    r["name"].as_str().unwrap()
                ),
                r.get("f").and_then(|f| f.as_f64()),
                r["value"].as_f64().unwrap(),
            ));
        }
    }
    out
}

#[test]
fn csv_export_round_trips_through_a_csv_parser_with_the_json_values() {
    let nb = demo("snubber-caps.md");
    let o = run(&["results", nb.to_str().unwrap(), "--format", "csv"]);
    assert!(o.status.success(), "{}", stderr(&o));
    let mut rdr = csv::Reader::from_reader(o.stdout.as_slice());
    let headers = rdr.headers().unwrap().clone();
    assert_eq!(
        headers.iter().collect::<Vec<_>>(),
        benchrec::export::CSV_HEADER.to_vec()
    );
    let mut from_csv = Vec::new();
    for rec in rdr.records() {
        let rec = rec.unwrap();
        let f = if rec[3].is_empty() {
            None
        } else {
            Some(rec[3].parse::<f64>().unwrap())
        };
        from_csv.push((
            format!("{}/{}", &rec[1], &rec[2]),
            f,
            rec[4].parse::<f64>().unwrap(),
        ));
    }
    assert_eq!(from_csv, result_values(&nb), "CSV and JSON disagree");
}

#[test]
fn sign_then_verify_then_tamper() {
    let (dir, nb) = copy_demo("snubber-caps.md");
    let original = std::fs::read_to_string(&nb).unwrap();
    let o = run(&[
        "sign",
        nb.to_str().unwrap(),
        "--by",
        "T. Reviewer",
        "--on",
        "2026-11-30T10:00:00Z",
        "--accept",
        "Kirchhoff excess traced to the probe lead, see notes",
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    let signed = std::fs::read_to_string(&nb).unwrap();
    // Only the front matter's closing fence moved down: every other byte is as it was.
    let close = original[4..].find("\n---\n").unwrap() + 5;
    let added = &signed[close..signed.len() - (original.len() - close)];
    assert!(
        added.starts_with("signoff:\n  by: \"T. Reviewer\"\n"),
        "unexpected insertion: {added}"
    );
    assert_eq!(
        format!("{}{}{}", &original[..close], added, &original[close..]),
        signed
    );
    assert_eq!(
        run(&["verify", nb.to_str().unwrap()]).status.code(),
        Some(0)
    );

    // Prose edits keep the sign-off valid.
    let prose_edit = signed.replace("Before the lot is fitted", "Before the reel is fitted");
    std::fs::write(&nb, &prose_edit).unwrap();
    assert_eq!(
        run(&["verify", nb.to_str().unwrap()]).status.code(),
        Some(0),
        "prose edit voided the sign-off"
    );

    // The PDF of a valid record verifies; a tampered attachment does not.
    let pdf = dir.path().join("signed.pdf");
    let o = run(&["build", nb.to_str().unwrap(), "-o", pdf.to_str().unwrap()]);
    assert!(o.status.success(), "{}", stderr(&o));
    assert_eq!(
        run(&["verify", pdf.to_str().unwrap()]).status.code(),
        Some(0)
    );
    let bytes = std::fs::read(&pdf).unwrap();
    let tampered = tamper_attachment(&bytes, "1.965", "1.975");
    let tpdf = dir.path().join("tampered.pdf");
    std::fs::write(&tpdf, tampered).unwrap();
    let o = run(&["verify", tpdf.to_str().unwrap()]);
    assert_eq!(
        o.status.code(),
        Some(1),
        "tampered attachment verified: {}",
        stdout(&o)
    );

    // A reading changed after signing voids it, and so does a part value.
    for (from, to) in [
        ("1.965", "1.964"),
        ("measured: 998.7 ohm", "measured: 998.8 ohm"),
    ] {
        let edited = prose_edit.replacen(from, to, 1);
        std::fs::write(&nb, &edited).unwrap();
        let o = run(&["verify", nb.to_str().unwrap()]);
        assert_eq!(
            o.status.code(),
            Some(1),
            "{from} → {to} did not void the sign-off"
        );
        assert!(stdout(&o).starts_with("void"), "{}", stdout(&o));
    }
}

/// Rewrites the embedded notebook of a PDF with one reading changed (lopdf).
fn tamper_attachment(pdf: &[u8], from: &str, to: &str) -> Vec<u8> {
    let mut doc = lopdf::Document::load_mem(pdf).unwrap();
    let ids: Vec<lopdf::ObjectId> = doc
        .objects
        .iter()
        .filter(|(_, o)| {
            o.as_stream()
                .is_ok_and(|s| matches!(s.dict.get(b"Type"), Ok(lopdf::Object::Name(n)) if n == b"EmbeddedFile")
                    && matches!(s.dict.get(b"Subtype"), Ok(lopdf::Object::Name(n)) if n.ends_with(b"markdown")))
        })
        .map(|(id, _)| *id)
        .collect();
    assert_eq!(ids.len(), 1, "one embedded file expected");
    let stream = doc.get_object_mut(ids[0]).unwrap().as_stream_mut().unwrap();
    let content = stream
        .decompressed_content()
        .unwrap_or_else(|_| stream.content.clone());
    let text = String::from_utf8(content).unwrap().replacen(from, to, 1);
    stream.dict.remove(b"Filter");
    stream.set_content(text.into_bytes());
    let mut out = Vec::new();
    doc.save_to(&mut out).unwrap();
    out
}

#[test]
fn new_writes_a_starter_that_builds_and_never_overwrites() {
    let dir = tempfile::tempdir().unwrap();
    let nb = dir.path().join("first.md");
    let o = run(&["new", nb.to_str().unwrap()]);
    assert!(o.status.success(), "{}", stderr(&o));
    let o = run(&["build", nb.to_str().unwrap()]);
    assert!(o.status.success(), "starter does not build: {}", stderr(&o));
    assert_eq!(run(&["new", nb.to_str().unwrap()]).status.code(), Some(1));
}

/// A tree with good, bad and non-notebook files.
fn lab_tree() -> tempfile::TempDir {
    let dir = tempfile::tempdir().unwrap();
    let root = dir.path();
    std::fs::create_dir_all(root.join("lot1/sub")).unwrap();
    std::fs::copy(demo("snubber-caps.md"), root.join("lot1/a.md")).unwrap();
    let starter = benchrec::starter::starter("TREE-B", "2026-11-02");
    std::fs::write(root.join("lot1/sub/b.md"), &starter).unwrap();
    let bad = starter.replacen("network: RC", "network: RQ", 1);
    std::fs::write(root.join("lot1/bad.md"), bad).unwrap();
    std::fs::write(
        root.join("lot1/README.md"),
        "# Not a notebook\n\nJust notes.\n",
    )
    .unwrap();
    std::fs::write(root.join("lot1/data.txt"), "not markdown").unwrap();
    dir
}

#[test]
fn folder_build_builds_good_reports_bad_skips_others_and_caches() {
    let dir = lab_tree();
    let root = dir.path().to_str().unwrap().to_string();
    let o = run(&["build", &root]);
    assert_eq!(
        o.status.code(),
        Some(1),
        "a failed notebook must make the exit status non-zero"
    );
    let out = stderr(&o);
    let err = stderr(&o);
    assert!(dir.path().join("lot1/a.pdf").is_file() && dir.path().join("lot1/sub/b.pdf").is_file());
    assert!(
        !dir.path().join("lot1/bad.pdf").exists() && !dir.path().join("lot1/README.pdf").exists()
    );
    let bad_line = benchrec::starter::starter("TREE-B", "2026-11-02")
        .lines()
        .position(|l| l.contains("network: RC"))
        .unwrap()
        + 1;
    assert!(
        err.contains(&format!("bad.md:{bad_line}:")),
        "bad notebook not located: {err}"
    );
    assert!(
        out.contains("2 built, 0 up to date, 1 skipped, 1 failed"),
        "summary: {out}"
    );
    assert_eq!(
        std::fs::read_to_string(dir.path().join("lot1/README.md")).unwrap(),
        "# Not a notebook\n\nJust notes.\n"
    );

    // Nothing changed: nothing rebuilt.
    std::fs::remove_file(dir.path().join("lot1/bad.md")).unwrap();
    let a_pdf = std::fs::read(dir.path().join("lot1/a.pdf")).unwrap();
    let o = run(&["build", &root]);
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(
        stderr(&o).contains("0 built, 2 up to date"),
        "{}",
        stderr(&o)
    );

    // Touching one reading rebuilds exactly that notebook.
    let a = dir.path().join("lot1/a.md");
    let t = std::fs::read_to_string(&a)
        .unwrap()
        .replacen("1.965", "1.966", 1);
    std::fs::write(&a, t).unwrap();
    let o = run(&["build", &root]);
    assert!(
        stderr(&o).contains("1 built, 1 up to date"),
        "{}",
        stderr(&o)
    );
    assert_ne!(std::fs::read(dir.path().join("lot1/a.pdf")).unwrap(), a_pdf);

    // --force rebuilds all.
    let o = run(&["build", &root, "--force"]);
    assert!(
        stderr(&o).contains("2 built, 0 up to date"),
        "{}",
        stderr(&o)
    );
}

#[test]
fn a_changed_user_template_rebuilds_every_notebook_that_uses_it() {
    let dir = tempfile::tempdir().unwrap();
    let tpl = dir.path().join("letterhead.typ");
    std::fs::write(&tpl, benchrec::render::BUILTIN_TEMPLATE).unwrap();
    for name in ["x", "y"] {
        let text = benchrec::starter::starter(name, "2026-11-02").replacen(
            "decision: guarded",
            "decision: guarded\ntemplate: letterhead.typ",
            1,
        );
        std::fs::write(dir.path().join(format!("{name}.md")), text).unwrap();
    }
    let root = dir.path().to_str().unwrap();
    let o = run(&["build", root]);
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(stderr(&o).contains("2 built"), "{}", stderr(&o));
    let o = run(&["build", root]);
    assert!(
        stderr(&o).contains("0 built, 2 up to date"),
        "{}",
        stderr(&o)
    );
    std::fs::write(
        &tpl,
        format!(
            "{}\n// lab letterhead v2\n",
            benchrec::render::BUILTIN_TEMPLATE
        ),
    )
    .unwrap();
    let o = run(&["build", root]);
    assert!(
        stderr(&o).contains("2 built, 0 up to date"),
        "{}",
        stderr(&o)
    );
}

#[test]
fn output_folder_mirrors_the_tree() {
    let dir = lab_tree();
    std::fs::remove_file(dir.path().join("lot1/bad.md")).unwrap();
    let out = tempfile::tempdir().unwrap();
    let o = run(&[
        "build",
        dir.path().to_str().unwrap(),
        "-o",
        out.path().to_str().unwrap(),
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(out.path().join("lot1/a.pdf").is_file() && out.path().join("lot1/sub/b.pdf").is_file());
    assert!(!dir.path().join("lot1/a.pdf").exists());
}

#[test]
fn watch_rebuilds_on_save_and_keeps_the_last_good_pdf() {
    let dir = tempfile::tempdir().unwrap();
    let nb = dir.path().join("w.md");
    let text = benchrec::starter::starter("WATCH-1", "2026-11-02");
    std::fs::write(&nb, &text).unwrap();
    let pdf = dir.path().join("w.pdf");
    let mut child = bin()
        .args(["watch", nb.to_str().unwrap(), "--max-builds", "2"])
        .stdout(std::process::Stdio::piped())
        .stderr(std::process::Stdio::piped())
        .spawn()
        .unwrap();
    let wait_for = |pred: &dyn Fn() -> bool| {
        let t0 = std::time::Instant::now();
        while !pred() {
            assert!(t0.elapsed().as_secs() < 60, "watch did not react in 60 s");
            std::thread::sleep(std::time::Duration::from_millis(100));
        }
    };
    std::thread::sleep(std::time::Duration::from_millis(700));
    std::fs::write(&nb, text.replacen("1.404", "1.405", 1)).unwrap();
    wait_for(&|| pdf.is_file());
    let good = std::fs::read(&pdf).unwrap();
    std::fs::write(&nb, text.replacen("1.404", "1.4o5", 1)).unwrap();
    let status = {
        let t0 = std::time::Instant::now();
        loop {
            if let Some(s) = child.try_wait().unwrap() {
                break s;
            }
            assert!(
                t0.elapsed().as_secs() < 60,
                "watch did not finish its two builds"
            );
            std::thread::sleep(std::time::Duration::from_millis(100));
        }
    };
    assert!(status.success());
    let out = child.wait_with_output().unwrap();
    // Status lines are on standard error.
    assert!(String::from_utf8_lossy(&out.stderr).contains("the last good PDF is kept"));
    assert_eq!(
        std::fs::read(&pdf).unwrap(),
        good,
        "a bad save replaced the good PDF"
    );
}

#[test]
fn prose_citations_print_the_result_and_unknown_ones_are_errors_at_their_line() {
    let dir = tempfile::tempdir().unwrap();
    let nb = dir.path().join("cite.md");
    let text = benchrec::starter::starter("CITE-1", "2026-11-02")
        .replace("Close with what the numbers mean", "OPEN `=cx-sweep.C` SHUT and at 800 Hz `=cx-sweep.XC@800Hz`.\n\nClose with what the numbers mean");
    std::fs::write(&nb, &text).unwrap();
    let o = run(&["build", nb.to_str().unwrap()]);
    assert!(o.status.success(), "{}", stderr(&o));
    let json: serde_json::Value =
        serde_json::from_str(&stdout(&run(&["results", nb.to_str().unwrap()]))).unwrap();
    let c = json["blocks"][0]["results"]
        .as_array()
        .unwrap()
        .iter()
        .find(|r| r["name"] == "C" && r.get("f").is_none())
        .unwrap()
        .clone();
    let printed = gum_726_farad(c["value"].as_f64().unwrap(), c["U"].as_f64().unwrap());
    let pdf = squash(&pdf_text_file(&dir.path().join("cite.pdf")));
    assert!(
        pdf.contains(&format!("OPEN{}SHUT", squash(&printed))),
        "citation not printed as {printed}: {}",
        &pdf[pdf.find("OPEN").unwrap_or(0)..][..60.min(pdf.len())]
    );

    let bad = text.replace("`=cx-sweep.XC@800Hz`", "`=cx-sweep.XL`");
    std::fs::write(&nb, &bad).unwrap();
    let line = bad
        .lines()
        .position(|l| l.contains("=cx-sweep.XL"))
        .unwrap()
        + 1;
    let col = bad
        .lines()
        .nth(line - 1)
        .unwrap()
        .find("`=cx-sweep.XL")
        .unwrap()
        + 1;
    let o = run(&["check", nb.to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(1));
    assert!(
        stderr(&o).contains(&format!("cite.md:{line}:{col}")),
        "{}",
        stderr(&o)
    );
    assert!(
        stderr(&o).contains("has no block result `XL`"),
        "{}",
        stderr(&o)
    );
}

/// GUM (JCGM 100:2008) Annex H.2: five simultaneous sets of V, I and φ (Table H.2), reduced
/// through `benchrec results`. Published (Table H.3): R = 127.732 Ω, u = 0.071 Ω;
/// X = 219.847 Ω, u = 0.295 Ω; |Z| = 254.260 Ω, u = 0.236 Ω; r(R,X) = −0.588,
/// r(R,Z) = −0.485, r(X,Z) = 0.993. The GUM rounds its intermediate values, so the last
/// published digit may differ by one (u(X) computes as 0.2956 against the printed 0.295).
#[test]
fn gum_h2_through_the_results_verb() {
    let dir = tempfile::tempdir().unwrap();
    let nb = dir.path().join("h2.md");
    std::fs::write(
        &nb,
        "---\nrecord: GUM-H2\ntitle: GUM H.2 check\ndate: 2026-11-02\noperator: test\n---\n\n\
```readings\nid: h2\nnetwork: Z\n---\nV/V I/mA phi/rad\n5.007 19.663 1.0456\n4.994 19.639 1.0438\n\
5.005 19.640 1.0468\n4.990 19.685 1.0428\n4.999 19.678 1.0433\n```\n",
    )
    .unwrap();
    let o = run(&["results", nb.to_str().unwrap()]);
    assert!(o.status.success(), "{}", stderr(&o));
    let json: serde_json::Value = serde_json::from_str(&stdout(&o)).unwrap();
    let block = &json["blocks"][0];
    let get = |name: &str| {
        let r = block["results"]
            .as_array()
            .unwrap()
            .iter()
            .find(|r| r["name"] == name)
            .unwrap()
            .clone();
        (r["value"].as_f64().unwrap(), r["u"].as_f64().unwrap())
    };
    // Within one unit of the last published digit.
    let close = |x: f64, published: f64, last: f64| (x - published).abs() <= last * 1.0001;
    for (name, v, u) in [
        ("R", 127.732, 0.071),
        ("X", 219.847, 0.295),
        ("Z", 254.260, 0.236),
    ] {
        let (cv, cu) = get(name);
        assert!(close(cv, v, 0.001), "{name} = {cv}, published {v}");
        assert!(close(cu, u, 0.001), "u({name}) = {cu}, published {u}");
    }
    let corr = |a: &str, b: &str| {
        block["correlations"]
            .as_array()
            .unwrap()
            .iter()
            .find(|c| (c["a"] == a && c["b"] == b) || (c["a"] == b && c["b"] == a))
            .unwrap()["r"]
            .as_f64()
            .unwrap()
    };
    assert!(
        close(corr("R", "X"), -0.588, 0.001),
        "r(R,X) = {}",
        corr("R", "X")
    );
    assert!(
        close(corr("R", "Z"), -0.485, 0.001),
        "r(R,Z) = {}",
        corr("R", "Z")
    );
    assert!(
        close(corr("X", "Z"), 0.993, 0.001),
        "r(X,Z) = {}",
        corr("X", "Z")
    );
}

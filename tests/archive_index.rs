//! `benchrec index DIR`: the static HTML page is read back with an HTML parser (tl), the
//! rows must say what each record's sign-off and summary say, hostile text stays text, an
//! unchanged archive is indexed from the cache, and `verify DIR` does not take the index for
//! a record.

mod common;

use common::*;
use std::path::PathBuf;

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

/// The five entities of HTML text (tl returns text as written).
fn unescape(t: &str) -> String {
    t.replace("&lt;", "<")
        .replace("&gt;", ">")
        .replace("&quot;", "\"")
        .replace("&#39;", "'")
        .replace("&amp;", "&")
}

/// Rows of the index table as (href, cell texts).
fn table_rows(html: &str) -> Vec<(String, Vec<String>)> {
    let dom = tl::parse(html, tl::ParserOptions::default()).expect("HTML parses");
    let p = dom.parser();
    let mut out = Vec::new();
    for tr in dom.query_selector("tr").expect("selector") {
        let tr = tr.get(p).unwrap();
        let cells: Vec<String> = tr
            .children()
            .unwrap()
            .top()
            .iter()
            .filter_map(|c| c.get(p))
            .filter(|c| c.as_tag().is_some_and(|t| t.name() == "td"))
            .map(|c| unescape(&c.inner_text(p)))
            .collect();
        if cells.is_empty() {
            continue; // the header row
        }
        let a = tr
            .as_tag()
            .unwrap()
            .query_selector(p, "a")
            .unwrap()
            .next()
            .unwrap();
        let href = a
            .get(p)
            .unwrap()
            .as_tag()
            .unwrap()
            .attributes()
            .get("href")
            .flatten()
            .unwrap();
        out.push((href.as_utf8_str().into_owned(), cells));
    }
    out
}

#[test]
fn index_lists_every_record_with_its_state_and_counts() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    std::fs::create_dir_all(d.join("lot a")).unwrap();
    std::fs::copy(root().join("demo/snubber-caps.md"), d.join("lot a/snub.md")).unwrap();
    std::fs::copy(root().join("demo/sensor-tank.md"), d.join("tank.md")).unwrap();
    // A hostile title must stay text.
    let hostile = std::fs::read_to_string(root().join("demo/sensor-tank.md"))
        .unwrap()
        .replacen("title: ", "title: <script>alert(1)</script> & ", 1);
    std::fs::write(d.join("hostile.md"), hostile).unwrap();
    // A record built and signed by version 0.1.0 (name only), kept under tests/fixtures.
    std::fs::copy(
        root().join("tests/fixtures/v0.1.0/snubber.pdf"),
        d.join("old.pdf"),
    )
    .unwrap();
    let o = run(&[
        "sign",
        s(&d.join("tank.md")),
        "--by",
        "ana@lab.example",
        "--on",
        "2026-12-01T10:00:00Z",
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(run(&["build", s(d)]).status.success());
    let o = run(&["index", s(d)]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    // The summary is a status line, on standard error.
    assert!(String::from_utf8_lossy(&o.stderr).contains("4 read"));
    let html = std::fs::read_to_string(d.join("index.html")).unwrap();
    let rows = table_rows(&html);
    assert_eq!(rows.len(), 4, "{rows:?}");
    let by = |href: &str| {
        rows.iter()
            .find(|r| r.0 == href)
            .unwrap_or_else(|| panic!("{href}: {rows:?}"))
    };
    // Columns: Record, Title, Date, Operator, Lab, Lot, State, Pass, Fail, Inc., Warnings, Past due.
    let snub = by("lot%20a/snub.pdf");
    assert_eq!(snub.1[0], "BR-DEMO-0101");
    assert_eq!(snub.1[6], "draft");
    // The snubber demo: two verdicts pass; its warnings are those `check` lists.
    let c = run(&["check", s(&d.join("lot a/snub.md"))]);
    let warnings = String::from_utf8_lossy(&c.stdout)
        .lines()
        .filter(|l| l.trim_start().starts_with("warning:"))
        .count()
        .to_string();
    assert_eq!(&snub.1[7..11], &["2", "0", "0", warnings.as_str()]);
    assert_eq!(by("tank.pdf").1[6], "name only");
    assert_eq!(by("old.pdf").1[6], "name only");
    let h = by("hostile.pdf");
    assert!(
        h.1[1].starts_with("<script>alert(1)</script> &"),
        "{:?}",
        h.1[1]
    );
    assert_eq!(
        html.matches("<script>").count(),
        1,
        "only the page's own script"
    );
    for (href, _) in &rows {
        let path = href.replace("%20", " ");
        assert!(d.join(path).is_file(), "{href} does not lead to the PDF");
    }
    let pdf = std::fs::read(d.join("index.pdf")).unwrap();
    assert!(pdf.starts_with(b"%PDF"));
    // Nothing changed: every row from the cache, the same bytes.
    let o = run(&["index", s(d)]);
    assert!(String::from_utf8_lossy(&o.stderr).contains("0 read, 4 unchanged"));
    assert_eq!(std::fs::read(d.join("index.pdf")).unwrap(), pdf);
    assert_eq!(std::fs::read_to_string(d.join("index.html")).unwrap(), html);
    // ... and the files are not written again (the index PDF is not typeset again).
    let mtime = |f: &str| std::fs::metadata(d.join(f)).unwrap().modified().unwrap();
    let (h0, p0) = (mtime("index.html"), mtime("index.pdf"));
    std::thread::sleep(std::time::Duration::from_millis(20));
    assert!(run(&["index", s(d)]).status.success());
    assert_eq!((mtime("index.html"), mtime("index.pdf")), (h0, p0));
    // A removed or edited index file is written again, the same bytes.
    std::fs::remove_file(d.join("index.pdf")).unwrap();
    std::fs::write(d.join("index.html"), "edited").unwrap();
    assert!(run(&["index", s(d)]).status.success());
    assert_eq!(std::fs::read(d.join("index.pdf")).unwrap(), pdf);
    assert_eq!(std::fs::read_to_string(d.join("index.html")).unwrap(), html);
    // A changed reading: that record is read again and shows void.
    let t = std::fs::read_to_string(d.join("tank.md")).unwrap();
    // The first reading row under the `f/Hz` heading: VR gets one more digit.
    let at = t.lines().position(|l| l.contains("f/Hz")).unwrap() + 2;
    let line = t.lines().nth(at).unwrap().to_string();
    let vr = line.split('|').nth(3).unwrap().trim().to_string();
    let bumped = line.replacen(&vr, &format!("{vr}1"), 1);
    std::fs::write(d.join("tank.md"), t.replacen(&line, &bumped, 1)).unwrap();
    assert!(run(&["build", s(&d.join("tank.md"))]).status.success());
    let o = run(&["index", s(d)]);
    assert!(String::from_utf8_lossy(&o.stderr).contains("1 read, 3 unchanged"));
    let html = std::fs::read_to_string(d.join("index.html")).unwrap();
    let rows2 = table_rows(&html);
    assert_eq!(
        rows2.iter().find(|r| r.0 == "tank.pdf").unwrap().1[6],
        "void"
    );
    // verify DIR does not take the index for a record.
    let v = run(&["verify", s(d)]);
    assert!(!String::from_utf8_lossy(&v.stdout).contains("index.pdf"));
}

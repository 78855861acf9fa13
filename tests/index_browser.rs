//! The archive index's sorting and filtering, run by a real browser: Debian's Chromium,
//! headless, on the page as written to disk (no server, no network). The page's content is
//! checked with an HTML parser in `archive_index.rs`; this checks that its script works.
//!
//! Runs when Chromium is installed (`chromium` on PATH, or BENCHREC_CHROMIUM names it). Without
//! it the test says so on standard error and passes, unless BENCHREC_REQUIRE_BROWSER=1, where
//! it fails (for a machine that is meant to have the browser).

use benchrec::index::{html_page, Row};
use std::path::PathBuf;
use std::process::Command;

fn browser() -> Option<PathBuf> {
    if let Some(p) = std::env::var_os("BENCHREC_CHROMIUM") {
        return Some(PathBuf::from(p));
    }
    let path = std::env::var_os("PATH")?;
    std::env::split_paths(&path)
        .flat_map(|d| ["chromium", "chromium-browser"].map(|n| d.join(n)))
        .find(|p| p.is_file())
}

fn row(pdf: &str, state: &str, lot: &str, fail: usize, title: &str) -> Row {
    Row {
        pdf: pdf.into(),
        record: pdf.trim_end_matches(".pdf").to_uppercase(),
        title: title.into(),
        date: "2026-11-02".into(),
        operator: "T. Tester (synthetic)".into(),
        lab: "Invented lab".into(),
        lot: lot.into(),
        state: state.into(),
        detail: String::new(),
        pass: 3,
        fail,
        inconclusive: 0,
        warnings: 0,
        overdue: Vec::new(),
    }
}

/// What the test script appends: clicks and selections as a user would make them, then the
/// visible record ids after each step, written into the page for `--dump-dom` to print.
const DRIVER: &str = r#"<script>
(function () {
  function visible() {
    return Array.prototype.filter.call(document.querySelectorAll('#records tbody tr'),
      function (r) { return r.style.display !== 'none'; })
      .map(function (r) { return r.cells[0].textContent; }).join(',');
  }
  function choose(id, v) {
    var s = document.getElementById(id); s.value = v; s.dispatchEvent(new Event('change'));
  }
  var out = [];
  var fail = document.querySelector('#records th[data-col="8"]');
  fail.click(); out.push('fail-up=' + visible());
  fail.click(); out.push('fail-down=' + visible());
  document.querySelector('#records th[data-col="1"]').click(); out.push('title=' + visible());
  choose('state', 'void'); out.push('void=' + visible());
  choose('lot', 'L2'); out.push('void-L2=' + visible());
  choose('state', ''); out.push('L2=' + visible());
  var pre = document.createElement('pre'); pre.id = 'driver';
  pre.textContent = out.join(';'); document.body.appendChild(pre);
})();
</script>
</body>"#;

#[test]
fn sorting_and_filtering_work_in_headless_chromium() {
    let Some(chromium) = browser() else {
        let required = std::env::var("BENCHREC_REQUIRE_BROWSER").is_ok_and(|v| v == "1");
        assert!(
            !required,
            "BENCHREC_REQUIRE_BROWSER=1 but no Chromium was found"
        );
        eprintln!("skipped: no Chromium on this machine (install Debian's `chromium` to run it)");
        return;
    };
    // Fail counts 2, 0, 10, 1: a numeric sort gives b, d, a, c; a text sort would put 10 first.
    let rows = vec![
        row("a.pdf", "valid (key)", "L1", 2, "delta"),
        row("b.pdf", "void", "L2", 0, "alpha"),
        row("c.pdf", "void", "L1", 10, "charlie"),
        row("d.pdf", "draft", "L2", 1, "bravo"),
    ];
    let page = html_page(&rows);
    assert_eq!(page.matches("</body>").count(), 1);
    let dir = tempfile::tempdir().unwrap();
    let file = dir.path().join("index.html");
    std::fs::write(&file, page.replace("</body>", DRIVER)).unwrap();
    let profile = dir.path().join("profile");
    let o = Command::new(&chromium)
        .args([
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--no-first-run",
        ])
        .arg(format!("--user-data-dir={}", profile.display()))
        .arg("--dump-dom")
        .arg(format!("file://{}", file.display()))
        .output()
        .expect("run chromium");
    let dom = String::from_utf8_lossy(&o.stdout);
    let got = dom
        .split_once("<pre id=\"driver\">")
        .and_then(|(_, rest)| rest.split_once("</pre>"))
        .map(|(t, _)| t.to_string())
        .unwrap_or_else(|| {
            panic!(
                "no driver output: {}\n{dom}",
                String::from_utf8_lossy(&o.stderr)
            )
        });
    assert_eq!(
        got,
        "fail-up=B,D,A,C;fail-down=C,A,D,B;title=B,D,C,A;void=B,C;void-L2=B;L2=B,D"
    );
}

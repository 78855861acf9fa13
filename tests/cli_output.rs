//! What the command line prints where: results on standard output, status lines on standard
//! error (silenced by -q), colour only when asked or on a terminal and never with NO_COLOR
//! (no-color.org), several notebooks in one `results`, the CSV's path column, and a folder
//! build that reports a near miss for the `record` key instead of skipping the file.

mod common;

use common::*;
use std::path::Path;

fn tree() -> tempfile::TempDir {
    let dir = tempfile::tempdir().unwrap();
    for (name, record) in [("a.md", "OUT-A"), ("b.md", "OUT-B")] {
        let text = base_notebook().replacen("record: HX-0001", &format!("record: {record}"), 1);
        std::fs::write(dir.path().join(name), text).unwrap();
    }
    dir
}

fn p(d: &Path, name: &str) -> String {
    d.join(name).to_str().unwrap().to_string()
}

#[test]
fn status_lines_go_to_standard_error_and_quiet_silences_them() {
    let d = tree();
    let o = run(&["build", &p(d.path(), "a.md")]);
    assert!(o.status.success(), "{}", stderr(&o));
    assert_eq!(stdout(&o), "", "build prints results nowhere: status only");
    assert!(stderr(&o).starts_with("built "), "{}", stderr(&o));
    let o = run(&["build", "-q", "--force", &p(d.path(), "a.md")]);
    assert!(o.status.success());
    assert_eq!((stdout(&o).as_str(), stderr(&o).as_str()), ("", ""));
    // -q never hides an error.
    std::fs::write(d.path().join("a.md"), "---\nrecord: X\n---\n").unwrap();
    let o = run(&["build", "-q", &p(d.path(), "a.md")]);
    assert_eq!(o.status.code(), Some(1));
    assert!(stderr(&o).contains("error"), "{}", stderr(&o));
}

#[test]
fn colour_only_when_asked_and_never_with_no_color() {
    let d = tree();
    let nb = p(d.path(), "a.md");
    // Not a terminal: no escape codes by default.
    let o = run(&["check", &nb]);
    assert!(!stdout(&o).contains('\u{1b}'), "{}", stdout(&o));
    // ECMA-48 SGR 32 (green) on the `ok` word when forced.
    let o = run(&["check", "--color", "always", &nb]);
    assert!(
        stdout(&o).starts_with("\u{1b}[32mok\u{1b}[0m "),
        "{:?}",
        stdout(&o)
    );
    let o = bin()
        .args(["check", "--color", "auto", &nb])
        .env("NO_COLOR", "1")
        .output()
        .unwrap();
    assert!(!stdout(&o).contains('\u{1b}'));
    let o = run(&["check", "--color", "never", &nb]);
    assert!(stdout(&o).starts_with("ok "));
}

#[test]
fn results_take_several_notebooks_and_the_csv_names_each_path() {
    let d = tree();
    let (a, b) = (p(d.path(), "a.md"), p(d.path(), "b.md"));
    let o = run(&["results", &a, &b]);
    assert!(o.status.success(), "{}", stderr(&o));
    let j: serde_json::Value = serde_json::from_str(&stdout(&o)).unwrap();
    let records: Vec<&str> = j
        .as_array()
        .expect("several notebooks give an array")
        .iter()
        .map(|r| r["record"].as_str().unwrap())
        .collect();
    assert_eq!(records, ["OUT-A", "OUT-B"]);
    // One notebook: the single document of FORMAT.md, as before.
    let o = run(&["results", &a]);
    let one: serde_json::Value = serde_json::from_str(&stdout(&o)).unwrap();
    assert_eq!(one["record"], "OUT-A");
    let o = run(&["results", "--format", "csv", &a, &b]);
    let text = stdout(&o);
    let mut rd = csv::Reader::from_reader(text.as_bytes());
    let head: Vec<String> = rd.headers().unwrap().iter().map(String::from).collect();
    let (ri, pi) = (
        head.iter().position(|h| h == "record").unwrap(),
        head.iter()
            .position(|h| h == "path")
            .expect("a path column"),
    );
    let mut pairs: Vec<(String, String)> = rd
        .records()
        .map(|r| {
            let r = r.unwrap();
            (r[ri].to_string(), r[pi].to_string())
        })
        .collect();
    pairs.dedup();
    assert_eq!(pairs, [("OUT-A".into(), a), ("OUT-B".into(), b)]);
}

#[test]
fn a_near_miss_for_record_is_reported_not_skipped() {
    let d = tree();
    let text = base_notebook();
    std::fs::write(
        d.path().join("typo.md"),
        text.replacen("record:", "recrod:", 1),
    )
    .unwrap();
    std::fs::write(
        d.path().join("quoted.md"),
        text.replacen("record:", "\"record\":", 1),
    )
    .unwrap();
    std::fs::write(d.path().join("notes.md"), "# Just notes\n").unwrap();
    let o = run(&["check", d.path().to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(1));
    let err = stderr(&o);
    assert!(err.contains("typo.md:2:1"), "{err}");
    assert!(err.contains("did you mean `record`?"), "{err}");
    // A quoted key is the key itself.
    assert!(stdout(&o).contains("quoted.md"), "{}", stdout(&o));
    assert!(!stdout(&o).contains("notes.md") && !err.contains("notes.md"));
}

#[test]
fn every_verb_explains_its_arguments_with_an_example_and_the_man_page_is_whole() {
    for verb in VERBS {
        let o = run(&[verb, "--help"]);
        assert!(o.status.success(), "{verb}");
        let help = stdout(&o);
        assert!(
            help.contains("Example"),
            "{verb} --help has no example:\n{help}"
        );
        // clap prints an argument with no help text as a bare name: every line of the
        // Arguments and Options lists must carry a description.
        for line in help
            .lines()
            .filter(|l| l.starts_with("  ") && !l.starts_with("   "))
        {
            let words = line.split_whitespace().count();
            assert!(
                words >= 3,
                "{verb}: argument without a description: {line:?}"
            );
        }
    }
    let o = run(&["man"]);
    let page = stdout(&o);
    for section in [
        ".SH COMMANDS",
        ".SH \"NOTEBOOK FORMAT\"",
        ".SH \"EXIT STATUS\"",
        ".SH EXAMPLES",
    ] {
        assert!(page.contains(section), "man page lacks {section}");
    }
    // It names no other page (clap_mangen's default lists benchrec-build(1) and so on).
    assert!(
        !page.contains("benchrec\\-build(1)") && !page.contains("(1)\n"),
        "{page}"
    );
}

//! Typst syntax, paths and links in a notebook are shown as text or refused, and no file
//! outside the notebook's folder is read.

mod common;

use common::*;
use std::path::{Path, PathBuf};
use std::process::Command;

const SECRET: &str = "SECRET-Q7Z4-PLUM-0192";

const INCLUDED: &str = "INCLUDED-W8K2-FIG-7731";

const LOCAL: &str = "LOCAL-R5T1-OAK-4410";

/// Builds the injection notebook in `root/nb/` beside a secret in `root/`. Returns the
/// notebook path and its output path.
fn injection_setup(root: &Path, extra_prose: &str, front_extra: &str) -> (PathBuf, PathBuf) {
    std::fs::write(root.join("secret.txt"), format!("{SECRET}\n")).unwrap();
    std::fs::write(root.join("secret.typ"), format!("{SECRET}\n#let x = 1\n")).unwrap();
    let nbdir = root.join("nb");
    std::fs::create_dir_all(&nbdir).unwrap();
    std::fs::write(nbdir.join("x.typ"), format!("{INCLUDED}\n")).unwrap();
    std::fs::write(nbdir.join("local.txt"), format!("{LOCAL}\n")).unwrap();
    let base = base_notebook();
    let base = base.replacen(
        "operator: T. Tester (synthetic)\n",
        &format!("operator: T. Tester (synthetic)\n{front_extra}"),
        1,
    );
    let base = base.replacen(
        "The block value is",
        &format!("{extra_prose}\n\nThe block value is"),
        1,
    );
    let nb = nbdir.join("inj.md");
    std::fs::write(&nb, base).unwrap();
    (nb.clone(), nbdir.join("inj.pdf"))
}

/// Literal Typst syntax in prose, front matter text and a block note: the PDF shows the
/// characters and no file is read (render/markup.rs promises escaping; Typst reference,
/// "Syntax": `#` enters code, `$` math, `@` a reference, `\` an escape, `//` a comment).
#[test]
fn typst_syntax_in_text_is_printed_literally_and_reads_no_file() {
    let root = tempfile::tempdir().unwrap();
    let prose = r#"Hash calls: #read("../secret.txt") and #include "x.typ" and #image("/etc/hosts") and #read("local.txt") stay text.

More: $x^2$ and @label and C:\temp\new and a // slash pair and #let y = 2 and #{1+1} end.

A link [see notes](../secret.txt) and another [etc](/etc/passwd) are text with a target.

| cell | with |
|------|------|
| #read("../secret.txt") | $z$ |

Code `#include "x.typ"` in a code span."#;
    let front =
        "lab: '#read(\"../secret.txt\") lab'\nproject: \"$a$ @ref #include \\\"x.typ\\\"\"\n";
    let (nb, out) = injection_setup(root.path(), prose, front);
    let o = run(&["build", s(&nb), "-o", s(&out)]);
    assert!(
        o.status.success(),
        "injection notebook must build (its text is harmless):\n{}",
        stderr(&o)
    );
    let bytes = std::fs::read(&out).unwrap();
    let text = squash(&pdf_text(&bytes));
    for lit in [
        r#"#read("../secret.txt")"#,
        r#"#include"x.typ""#,
        r#"#image("/etc/hosts")"#,
        r#"#read("local.txt")"#,
        "$x^2$",
        "@label",
        r"C:\temp\new",
        "a//slashpair",
        "#lety=2",
        "#{1+1}",
        "seenotes",
    ] {
        assert!(
            text.contains(lit),
            "literal `{lit}` missing from the PDF text"
        );
    }
    let lab = squash(r#"#read("../secret.txt") lab"#);
    assert!(
        text.contains(&lab),
        "front matter `lab` text not shown literally"
    );
    let streams = pdf_all_stream_bytes(&bytes);
    for marker in [SECRET, INCLUDED, LOCAL, "root:x:0:0"] {
        assert!(
            !text.contains(marker),
            "`{marker}` leaked into the PDF text"
        );
        assert!(
            !contains_bytes(&bytes, marker.as_bytes()),
            "`{marker}` leaked into the PDF bytes"
        );
        assert!(
            !contains_bytes(&streams, marker.as_bytes()),
            "`{marker}` leaked into a PDF stream"
        );
    }
    if let Ok(hosts) = std::fs::read_to_string("/etc/hosts") {
        let line = hosts
            .lines()
            .map(str::trim)
            .find(|l| l.len() > 12 && !l.starts_with('#'));
        if let Some(l) = line {
            assert!(
                !contains_bytes(&streams, l.as_bytes()),
                "/etc/hosts content leaked into the PDF"
            );
        }
    }
}

/// Under strace (when installed), the build opens neither the secret nor /etc/hosts, nor
/// any file of the notebook's folder except the notebook itself (no image is named).
#[test]
fn injection_build_opens_no_file_outside_under_strace() {
    if Command::new("strace")
        .arg("-V")
        .output()
        .map(|o| !o.status.success())
        .unwrap_or(true)
    {
        eprintln!("strace not installed; skipped");
        return;
    }
    let root = tempfile::tempdir().unwrap();
    let prose =
        r#"Calls #read("../secret.txt") #include "x.typ" #image("/etc/hosts") #read("local.txt")."#;
    let (nb, out) = injection_setup(root.path(), prose, "");
    let log = root.path().join("trace.log");
    let o = Command::new("strace")
        .args([
            "-f",
            "-qq",
            "-e",
            "trace=open,openat,openat2,stat,newfstatat,statx,access",
            "-o",
            s(&log),
        ])
        .arg(env!("CARGO_BIN_EXE_benchrec"))
        .args(["build", s(&nb), "-o", s(&out)])
        .output()
        .unwrap();
    if !log.exists() {
        eprintln!(
            "strace could not trace here ({}); skipped",
            String::from_utf8_lossy(&o.stderr)
        );
        return;
    }
    assert!(o.status.success(), "{}", stderr(&o));
    let trace = std::fs::read_to_string(&log).unwrap();
    for bad in [
        "secret.txt",
        "secret.typ",
        "/etc/hosts",
        "/etc/passwd",
        "x.typ\"",
        "local.txt",
    ] {
        let hits: Vec<&str> = trace.lines().filter(|l| l.contains(bad)).collect();
        assert!(
            hits.is_empty(),
            "the build touched `{bad}`:\n{}",
            hits.join("\n")
        );
    }
}

/// Images and templates outside the folder are refused with a located message, also when
/// the path looks inside but a symbolic link leads out; the outside file's bytes never reach
/// the PDF.
#[test]
fn paths_outside_the_folder_are_refused() {
    let root = tempfile::tempdir().unwrap();
    let mut secret_png = TINY_PNG.to_vec();
    secret_png.extend_from_slice(SECRET.as_bytes()); // trailing bytes after IEND
    std::fs::write(root.path().join("secret.png"), &secret_png).unwrap();
    let cases: Vec<(&str, String, &str)> = vec![
        ("image-parent", "![t](../secret.png)".into(), ""),
        (
            "image-absolute",
            format!("![t]({})", root.path().join("secret.png").display()),
            "",
        ),
        (
            "image-dotdot-inside",
            "![t](sub/../../secret.png)".into(),
            "",
        ),
        ("image-symlink", "![t](link.png)".into(), ""),
        ("image-etc-passwd", "![t](/etc/passwd)".into(), ""),
        (
            "template-parent",
            String::new(),
            "template: ../secret.typ\n",
        ),
        (
            "template-absolute",
            String::new(),
            "template: /etc/passwd\n",
        ),
        ("template-symlink", String::new(), "template: tlink.typ\n"),
    ];
    let mut failures = Vec::new();
    for (name, prose, front) in cases {
        let sub = root.path().join(name);
        std::fs::create_dir_all(&sub).unwrap();
        let (nb, out) = injection_setup(&sub, &prose, front);
        let nbdir = nb.parent().unwrap();
        std::fs::create_dir_all(nbdir.join("sub")).unwrap();
        std::fs::write(sub.join("secret.png"), &secret_png).unwrap();
        #[cfg(unix)]
        {
            let _ = std::os::unix::fs::symlink(sub.join("secret.png"), nbdir.join("link.png"));
            let _ = std::os::unix::fs::symlink(sub.join("secret.typ"), nbdir.join("tlink.typ"));
        }
        let o = run(&["build", s(&nb), "-o", s(&out)]);
        let err = stderr(&o);
        let mut p = Vec::new();
        if o.status.code() != Some(1) {
            p.push(format!("exit {:?}, expected 1", o.status.code()));
        }
        if !err.contains("inj.md:") || !err.to_lowercase().contains("outside") {
            p.push("no located `outside` refusal".to_string());
        }
        if let Ok(bytes) = std::fs::read(&out) {
            if contains_bytes(&bytes, SECRET.as_bytes())
                || contains_bytes(&pdf_all_stream_bytes(&bytes), SECRET.as_bytes())
                || squash(&pdf_text(&bytes)).contains(SECRET)
            {
                p.push("the outside file's content is in the PDF".into());
            }
        }
        if !p.is_empty() {
            failures.push(format!(
                "{name}: {}\n    stderr: {}",
                p.join("; "),
                err.trim().replace('\n', "\n    | ")
            ));
        }
    }
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}

//! A sign-off that proves who signed: SSH signatures checked by OpenSSH's own `ssh-keygen`
//! (the outside check), allowed-signers lists, hand edits, refusals, front-matter edits in any
//! YAML spelling, PDFs whose pages and attachment disagree, `verify DIR`, and records made by
//! version 0.1.0.

use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};

fn run(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_benchrec"))
        .args(args)
        .output()
        .expect("benchrec runs")
}

fn out(o: &Output) -> String {
    format!(
        "{}{}",
        String::from_utf8_lossy(&o.stdout),
        String::from_utf8_lossy(&o.stderr)
    )
}

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

/// `ssh-keygen`, which the CI installs (openssh-client) when it is missing.
fn keygen() -> Command {
    Command::new("ssh-keygen")
}

/// A fresh ed25519 key pair made by OpenSSH; returns (private key path, public key line).
fn new_key(dir: &Path, name: &str) -> (PathBuf, String) {
    let key = dir.join(name);
    let o = keygen()
        .args(["-q", "-t", "ed25519", "-N", "", "-C", name, "-f", s(&key)])
        .output()
        .expect("ssh-keygen runs (install openssh-client)");
    assert!(o.status.success(), "{}", out(&o));
    let public = std::fs::read_to_string(key.with_extension("pub")).unwrap();
    (key, public.trim().to_string())
}

fn allowed(dir: &Path, name: &str, lines: &[String]) -> PathBuf {
    let p = dir.join(name);
    std::fs::write(&p, lines.join("\n") + "\n").unwrap();
    p
}

/// The snubber demo (invented data) copied into a fresh folder.
fn demo_copy(dir: &Path) -> PathBuf {
    let nb = dir.join("snub.md");
    std::fs::copy(root().join("demo/snubber-caps.md"), &nb).unwrap();
    nb
}

fn sign(nb: &Path, extra: &[&str]) -> Output {
    let mut args = vec![
        "sign",
        s(nb),
        "--by",
        "ana@lab.example",
        "--on",
        "2026-12-01T09:30:00Z",
    ];
    args.extend_from_slice(extra);
    run(&args)
}

/// Signs, with `--accept` when the record has reservations.
fn sign_ok(nb: &Path, extra: &[&str]) {
    let mut o = sign(nb, extra);
    if !o.status.success() && out(&o).contains("--accept") {
        let mut e = extra.to_vec();
        e.extend_from_slice(&["--accept", "reviewed on the bench"]);
        o = sign(nb, &e);
    }
    assert!(o.status.success(), "{}", out(&o));
}

fn signoff_field(nb: &Path, field: &str) -> String {
    let text = std::fs::read_to_string(nb).unwrap();
    let front = text
        .split("\n---\n")
        .next()
        .unwrap()
        .trim_start_matches("---\n");
    let v: serde_yaml::Value = serde_yaml::from_str(front).unwrap();
    v["signoff"][field].as_str().unwrap_or("").to_string()
}

#[test]
fn openssh_accepts_the_signature_over_the_documented_message() {
    let dir = tempfile::tempdir().unwrap();
    let (key, public) = new_key(dir.path(), "ana");
    let nb = demo_copy(dir.path());
    sign_ok(&nb, &["--key", s(&key)]);
    let sig = signoff_field(&nb, "signature");
    assert!(sig.starts_with("-----BEGIN SSH SIGNATURE-----"), "{sig}");
    let text = std::fs::read_to_string(&nb).unwrap();
    let record = text
        .lines()
        .find_map(|l| l.strip_prefix("record: "))
        .unwrap()
        .trim();
    // FORMAT.md, "Sign-off with a key": these four lines, each ending in a newline.
    let msg = format!(
        "record: {record}\ndigest: {}\nby: {}\non: {}\n",
        signoff_field(&nb, "digest"),
        signoff_field(&nb, "by"),
        signoff_field(&nb, "on")
    );
    std::fs::write(dir.path().join("sig"), &sig).unwrap();
    let signers = allowed(
        dir.path(),
        "allowed",
        &[format!("ana@lab.example {public}")],
    );
    let check = |m: &str| {
        let mut c = keygen()
            .args(["-Y", "verify", "-f", s(&signers), "-I", "ana@lab.example"])
            .args(["-n", "benchrec", "-s", s(&dir.path().join("sig"))])
            .stdin(Stdio::piped())
            .stdout(Stdio::piped())
            .stderr(Stdio::piped())
            .spawn()
            .unwrap();
        use std::io::Write;
        c.stdin.take().unwrap().write_all(m.as_bytes()).unwrap();
        c.wait_with_output().unwrap()
    };
    let good = check(&msg);
    assert!(good.status.success(), "ssh-keygen refused: {}", out(&good));
    assert!(out(&good).contains("Good \"benchrec\" signature for ana@lab.example"));
    // The same signature over another name is refused by OpenSSH too.
    let bad = check(&msg.replace("by: ana@", "by: bob@"));
    assert!(!bad.status.success());
    // The recorded key is the fingerprint `ssh-keygen -l` prints.
    let l = keygen()
        .args(["-l", "-f", s(&key.with_extension("pub"))])
        .output()
        .unwrap();
    assert!(out(&l).contains(&signoff_field(&nb, "key")), "{}", out(&l));
}

#[test]
fn signers_list_decides_who_signed() {
    let dir = tempfile::tempdir().unwrap();
    let (key, public) = new_key(dir.path(), "ana");
    let (_other, other_public) = new_key(dir.path(), "bob");
    let nb = demo_copy(dir.path());
    sign_ok(&nb, &["--key", s(&key)]);

    let o = run(&["verify", s(&nb)]);
    assert_eq!(o.status.code(), Some(0), "{}", out(&o));
    assert!(
        out(&o).contains("not checked against a list"),
        "{}",
        out(&o)
    );

    let listed = allowed(
        dir.path(),
        "ok",
        &[format!("*@lab.example namespaces=\"benchrec\" {public}")],
    );
    let o = run(&["verify", s(&nb), "--signers", s(&listed)]);
    assert_eq!(o.status.code(), Some(0), "{}", out(&o));
    assert!(out(&o).contains("listed for ana@lab.example"));

    for (name, line) in [
        ("other-key", format!("ana@lab.example {other_public}")),
        ("other-name", format!("bob@lab.example {public}")),
        (
            "other-namespace",
            format!("ana@lab.example namespaces=\"git\" {public}"),
        ),
        (
            "expired",
            format!("ana@lab.example valid-before=\"20260101\" {public}"),
        ),
        ("negated", format!("*@lab.example,!ana@* {public}")),
    ] {
        let f = allowed(dir.path(), name, &[line]);
        let o = run(&["verify", s(&nb), "--signers", s(&f)]);
        assert_eq!(o.status.code(), Some(1), "{name}: {}", out(&o));
        assert!(out(&o).contains("not listed"), "{name}: {}", out(&o));
    }
    // A malformed list is an error at its line, not a silent pass.
    let f = allowed(
        dir.path(),
        "broken",
        &["ana@lab.example ssh-ed25519 notbase64".into()],
    );
    let o = run(&["verify", s(&nb), "--signers", s(&f)]);
    assert_eq!(o.status.code(), Some(1));
    assert!(out(&o).contains("line 1"), "{}", out(&o));
}

#[test]
fn hand_edits_of_a_keyed_signoff_are_caught() {
    let dir = tempfile::tempdir().unwrap();
    let (key, _) = new_key(dir.path(), "ana");
    let nb = demo_copy(dir.path());
    sign_ok(&nb, &["--key", s(&key)]);
    let signed = std::fs::read_to_string(&nb).unwrap();
    let fp = signoff_field(&nb, "key");
    for (what, from, to) in [
        ("name", "\"ana@lab.example\"", "\"Z. Somebody\""),
        (
            "date",
            "\"2026-12-01T09:30:00Z\"",
            "\"2026-11-01T09:30:00Z\"",
        ),
        (
            "key",
            fp.as_str(),
            "SHA256:AAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAA",
        ),
    ] {
        assert!(signed.contains(from), "{what}");
        std::fs::write(&nb, signed.replacen(from, to, 1)).unwrap();
        let o = run(&["verify", s(&nb)]);
        assert_eq!(o.status.code(), Some(1), "{what} edit passed: {}", out(&o));
        assert!(out(&o).contains("not authentic"), "{what}: {}", out(&o));
        // The record says so too.
        let b = run(&["build", s(&nb)]);
        assert!(b.status.success(), "{}", out(&b));
    }
    // A reading changed after signing voids it.
    std::fs::write(&nb, signed.replacen("1.965", "1.964", 1)).unwrap();
    let o = run(&["verify", s(&nb)]);
    assert_eq!(o.status.code(), Some(1));
    assert!(out(&o).starts_with("void"), "{}", out(&o));
}

#[test]
fn sign_refuses_what_it_cannot_stand_behind() {
    let dir = tempfile::tempdir().unwrap();
    let nb = demo_copy(dir.path());
    let before = std::fs::read(&nb).unwrap();
    for (args, why) in [
        (vec!["--by", ""], "empty"),
        (vec!["--by", "   "], "empty"),
        (vec!["--by", "A", "--on", "yesterday"], "ISO 8601"),
        (
            vec!["--by", "A", "--on", "2026-13-45T10:00:00Z"],
            "ISO 8601",
        ),
        (vec!["--by", "A", "--on", "2026-12-01"], "ISO 8601"),
        (vec!["--by", "A", "--accept", ""], "empty"),
    ] {
        let mut a = vec!["sign", s(&nb)];
        a.extend(args.iter().copied());
        let o = run(&a);
        assert_eq!(o.status.code(), Some(1), "{args:?}: {}", out(&o));
        assert!(out(&o).contains(why), "{args:?}: {}", out(&o));
        assert_eq!(
            std::fs::read(&nb).unwrap(),
            before,
            "{args:?} changed the notebook"
        );
    }
    // A notebook with errors is not signed.
    let broken = String::from_utf8(before.clone())
        .unwrap()
        .replacen("1.965", "1.9x5", 1);
    std::fs::write(&nb, &broken).unwrap();
    let o = run(&["sign", s(&nb), "--by", "A"]);
    assert_eq!(o.status.code(), Some(1));
    assert_eq!(std::fs::read_to_string(&nb).unwrap(), broken);
}

/// A notebook whose C verdict fails: signed only with `--accept`, whose reason is kept.
#[test]
fn reservations_need_a_stated_reason() {
    let dir = tempfile::tempdir().unwrap();
    let nb = demo_copy(dir.path());
    let text = std::fs::read_to_string(&nb).unwrap();
    // Move every part's nominal far off, so verdicts fail.
    let off = text.replace("nominal: ", "nominal: 7");
    std::fs::write(&nb, &off).unwrap();
    let c = run(&["check", s(&nb)]);
    assert!(c.status.success(), "{}", out(&c));
    let o = run(&["sign", s(&nb), "--by", "A", "--on", "2026-12-01T09:30:00Z"]);
    assert_eq!(o.status.code(), Some(1), "{}", out(&o));
    assert!(
        out(&o).contains("--accept") && out(&o).contains("fail"),
        "{}",
        out(&o)
    );
    assert_eq!(std::fs::read_to_string(&nb).unwrap(), off);
    let o = run(&[
        "sign",
        s(&nb),
        "--by",
        "A",
        "--on",
        "2026-12-01T09:30:00Z",
        "--accept",
        "lot quarantined; record kept for the supplier claim",
    ]);
    assert!(o.status.success(), "{}", out(&o));
    assert_eq!(
        signoff_field(&nb, "accepted"),
        "lot quarantined; record kept for the supplier claim"
    );
    let pdf = dir.path().join("snub.pdf");
    assert!(run(&["build", s(&nb)]).status.success());
    let t = pdf_extract::extract_text_from_mem(&std::fs::read(&pdf).unwrap()).unwrap();
    let flat: String = t.split_whitespace().collect::<Vec<_>>().join(" ");
    assert!(
        flat.contains("lot quarantined; record kept for the supplier claim"),
        "{flat}"
    );
    assert!(flat.contains("name only, not authenticated"), "{flat}");
}

#[test]
fn signoff_key_in_any_yaml_spelling_is_edited_in_place() {
    let dir = tempfile::tempdir().unwrap();
    let nb = demo_copy(dir.path());
    let text = std::fs::read_to_string(&nb).unwrap();
    let body = text.strip_prefix("---\n").unwrap();
    for (name, entry) in [
        ("double", "\"signoff\":\n  by: old\n  on: x\n  digest: y\n"),
        ("single", "'signoff' : {by: old, on: x, digest: y}\n"),
        (
            "escaped",
            "\"sign\\x6Fff\":\n    by: old\n    # a comment\n    on: x\n    digest: y\n",
        ),
    ] {
        let p = dir.path().join(format!("{name}.md"));
        std::fs::write(&p, format!("---\n{entry}{body}")).unwrap();
        let o = sign(&p, &["--accept", "test"]);
        assert!(o.status.success(), "{name}: {}", out(&o));
        let after = std::fs::read_to_string(&p).unwrap();
        assert_eq!(after.matches("signoff").count(), 1, "{name}: {after}");
        assert!(
            after.ends_with(body.split_once("\n---\n").unwrap().1),
            "{name}: body changed"
        );
        let o = run(&["verify", s(&p)]);
        assert_eq!(o.status.code(), Some(0), "{name}: {}", out(&o));
    }
}

#[cfg(unix)]
#[test]
fn signing_through_a_symlink_edits_the_target_and_rebuilds_the_pdf() {
    use std::os::unix::fs::PermissionsExt;
    let dir = tempfile::tempdir().unwrap();
    let nb = demo_copy(dir.path());
    std::fs::set_permissions(&nb, std::fs::Permissions::from_mode(0o640)).unwrap();
    let link = dir.path().join("link.md");
    std::os::unix::fs::symlink(&nb, &link).unwrap();
    assert!(run(&["build", s(&link)]).status.success());
    let pdf = dir.path().join("link.pdf");
    let before = std::fs::read(&pdf).unwrap();
    sign_ok(&link, &[]);
    assert!(std::fs::symlink_metadata(&link)
        .unwrap()
        .file_type()
        .is_symlink());
    assert!(std::fs::read_to_string(&nb).unwrap().contains("signoff:"));
    assert_eq!(
        std::fs::metadata(&nb).unwrap().permissions().mode() & 0o777,
        0o640
    );
    assert_ne!(
        std::fs::read(&pdf).unwrap(),
        before,
        "the PDF beside it was not rebuilt"
    );
    let o = run(&["verify", s(&pdf)]);
    assert_eq!(o.status.code(), Some(0), "{}", out(&o));
}

/// Replaces the notebook embedded in `pdf` with `notebook` (as qpdf could), pages untouched.
fn swap_attachment(pdf: &[u8], notebook: &[u8]) -> Vec<u8> {
    let mut doc = lopdf::Document::load_mem(pdf).unwrap();
    let ids: Vec<lopdf::ObjectId> = doc
        .objects
        .iter()
        .filter(|(_, o)| {
            o.as_stream().is_ok_and(
                |s| matches!(s.dict.get(b"Type"), Ok(lopdf::Object::Name(n)) if n == b"EmbeddedFile")
                    && matches!(s.dict.get(b"Subtype"), Ok(lopdf::Object::Name(n)) if n.ends_with(b"markdown")),
            )
        })
        .map(|(id, _)| *id)
        .collect();
    assert_eq!(ids.len(), 1);
    let st = doc.get_object_mut(ids[0]).unwrap().as_stream_mut().unwrap();
    st.dict.remove(b"Filter");
    st.dict.remove(b"Params");
    st.set_content(notebook.to_vec());
    let mut out = Vec::new();
    doc.save_to(&mut out).unwrap();
    out
}

#[test]
fn a_pdf_whose_attachment_was_swapped_does_not_verify() {
    let dir = tempfile::tempdir().unwrap();
    let a = demo_copy(dir.path());
    let b = dir.path().join("tank.md");
    std::fs::copy(root().join("demo/sensor-tank.md"), &b).unwrap();
    sign_ok(&a, &[]);
    sign_ok(&b, &[]);
    for nb in [&a, &b] {
        assert!(run(&["build", s(nb)]).status.success());
    }
    let pa = dir.path().join("snub.pdf");
    let o = run(&["verify", s(&pa)]);
    assert_eq!(o.status.code(), Some(0), "{}", out(&o));
    let swapped = swap_attachment(&std::fs::read(&pa).unwrap(), &std::fs::read(&b).unwrap());
    let ps = dir.path().join("swapped.pdf");
    std::fs::write(&ps, swapped).unwrap();
    let o = run(&["verify", s(&ps)]);
    assert_eq!(o.status.code(), Some(1), "{}", out(&o));
    assert!(
        out(&o).contains("the pages do not match the attached notebook"),
        "{}",
        out(&o)
    );
}

#[test]
fn verify_dir_gives_one_line_per_record() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let (key, _) = new_key(d, "ana");
    let mk = |name: &str| {
        let p = d.join(format!("{name}.md"));
        std::fs::copy(root().join("demo/snubber-caps.md"), &p).unwrap();
        p
    };
    let valid = mk("valid");
    sign_ok(&valid, &["--key", s(&key)]);
    let name_only = mk("nameonly");
    sign_ok(&name_only, &[]);
    let void = mk("void");
    sign_ok(&void, &[]);
    let unsigned = mk("unsigned");
    for nb in [&valid, &name_only, &void, &unsigned] {
        assert!(run(&["build", s(nb)]).status.success());
    }
    let t = std::fs::read_to_string(&void)
        .unwrap()
        .replacen("1.965", "1.964", 1);
    std::fs::write(&void, t).unwrap();
    assert!(run(&["build", s(&void)]).status.success());
    let o = run(&["verify", s(d)]);
    assert_eq!(o.status.code(), Some(1), "{}", out(&o));
    let text = out(&o);
    for (word, file) in [
        ("valid", "valid.pdf"),
        ("name only", "nameonly.pdf"),
        ("void", "void.pdf"),
        ("unsigned", "unsigned.pdf"),
    ] {
        assert!(
            text.lines()
                .any(|l| l.starts_with(word) && l.contains(file)),
            "{word} {file}: {text}"
        );
    }
    // Only the valid one left: exit 0.
    for f in ["nameonly.pdf", "void.pdf", "unsigned.pdf"] {
        std::fs::remove_file(d.join(f)).unwrap();
    }
    let o = run(&["verify", s(d)]);
    assert_eq!(o.status.code(), Some(0), "{}", out(&o));
}

/// Records signed (name only) and built by version 0.1.0 keep verifying.
#[test]
fn records_made_by_version_0_1_0_still_verify() {
    let fx = root().join("tests/fixtures/v0.1.0");
    for f in [
        "signed-tank.md",
        "signed-tank.pdf",
        "snubber.md",
        "snubber.pdf",
    ] {
        let o = run(&["verify", s(&fx.join(f))]);
        assert_eq!(o.status.code(), Some(0), "{f}: {}", out(&o));
        assert!(out(&o).starts_with("name only"), "{f}: {}", out(&o));
        assert!(out(&o).contains("the digest matches"), "{f}: {}", out(&o));
    }
}

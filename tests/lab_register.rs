//! The lab register (`lab.yaml`, FORMAT.md 1.1) through the CLI, in a temporary tree: asset ids
//! named by notebooks, overrides, calibration history, the derating policy, the sign-off digest
//! and a broken register. All names, dates and readings are invented.

mod common;
use common::*;
use std::path::Path;

/// An invented register: a meter calibrated twice (a gap between the first due date and the
/// second calibration), a spare meter, and a derating policy.
const REGISTER: &str = "lab: Invented calibration bench\ninstruments:\n  DMM-07:\n    what: bench meter (invented)\n    accuracy: 0.5% + 2\n    resolution: 0.1 mV\n    history:\n      - {calibrated: 2025-09-01, due: 2026-09-01, certificate: CAL-0991}\n      - {calibrated: 2026-09-20, due: 2027-09-20, certificate: CAL-1204}\n  DMM-08:\n    what: spare meter (invented)\n    accuracy: 1%\ndefaults:\n  derating: {resistor_power: 40%, capacitor_voltage: 60%, inductor_current: 70%}\n";

/// A notebook on `date` whose block reads with `meter`; `own` is inserted as its own
/// `instruments` section (empty for none). The readings are those of the catalogue's base
/// notebook (tests/malformed/ok-minimal.md), made by complex arithmetic.
fn notebook(record: &str, date: &str, meter: &str, own: &str) -> String {
    format!(
        "---\nrecord: {record}\ntitle: Register test\ndate: {date}\noperator: T. Tester (synthetic)\n{own}parts:\n  R1:\n    kind: resistor\n    nominal: 2.2 kohm\n    tolerance: 1%\n    rating: 2 mW\n  C1:\n    kind: capacitor\n    nominal: 68 nF\n    tolerance: K\n---\n\nInvented readings.\n\n```readings\nid: blk\nnetwork: RC\nparts: [R1, C1]\nmeter: {meter}\n---\nf/Hz    VR/V     VC/V\n400     0.5279   1.4040\n800     0.9015   1.1989\n1600    1.2491   0.8305\n3200    1.4234   0.4732\n```\n"
    )
}

/// `root/lab.yaml` and `root/bench/<name>` for each notebook.
fn tree(root: &Path, register: &str, notebooks: &[(&str, String)]) {
    std::fs::write(root.join("lab.yaml"), register).unwrap();
    std::fs::create_dir_all(root.join("bench")).unwrap();
    for (name, text) in notebooks {
        std::fs::write(root.join("bench").join(name), text).unwrap();
    }
}

#[test]
fn an_own_entry_overrides_the_register_and_the_record_says_so() {
    let dir = tempfile::tempdir().unwrap();
    let own = "instruments:\n  DMM-07:\n    what: own meter\n    accuracy: 1%\n";
    tree(
        dir.path(),
        REGISTER,
        &[("nb.md", notebook("LR-1", "2026-10-05", "DMM-07", own))],
    );
    let nb = dir.path().join("bench/nb.md");
    let o = run(&["check", "-v", s(&nb)]);
    assert!(o.status.success(), "{}", stderr(&o));
    let out = stdout(&o);
    // The note sits at the block's `meter:` value (line 28, column 8 of this notebook).
    assert!(
        out.contains(&format!("note: {}:28:8: DMM-07 is this notebook's own instrument entry, which overrides the lab register's", s(&nb))),
        "{out}"
    );
}

#[test]
fn an_asset_in_neither_place_is_an_error_at_its_line() {
    let dir = tempfile::tempdir().unwrap();
    tree(
        dir.path(),
        REGISTER,
        &[("nb.md", notebook("LR-2", "2026-10-05", "DMM-09", ""))],
    );
    let nb = dir.path().join("bench/nb.md");
    let o = run(&["check", s(&nb)]);
    assert!(!o.status.success());
    let err = stderr(&o);
    assert!(
        err.contains(
            "instrument `DMM-09` is defined neither in the front matter nor in the lab register"
        ),
        "{err}"
    );
    // `meter: DMM-09` is line 24; the value starts in column 8.
    assert!(err.contains(&format!("{}:24:8", s(&nb))), "{err}");
}

#[test]
fn the_calibration_current_on_the_readings_date_is_printed_and_a_lapse_warned() {
    let dir = tempfile::tempdir().unwrap();
    tree(
        dir.path(),
        REGISTER,
        &[
            // After the first due date, before the second calibration: lapsed.
            ("gap.md", notebook("LR-3", "2026-09-10", "DMM-07", "")),
            // After the second calibration: current, certificate CAL-1204.
            ("ok.md", notebook("LR-4", "2026-10-05", "DMM-07", "")),
        ],
    );
    let gap = dir.path().join("bench/gap.md");
    let o = run(&["check", s(&gap)]);
    let out = stdout(&o);
    assert!(
        out.contains(&format!("warning: {}:24:8: readings dated 2026-09-10 were taken after the calibration of DMM-07 fell due (2026-09-01)", s(&gap))),
        "{out}"
    );
    let ok = dir.path().join("bench/ok.md");
    let o = run(&["check", s(&ok)]);
    assert!(stdout(&o).contains("0 warnings"), "{}", stdout(&o));

    let o = run(&["build", s(&dir.path().join("bench"))]);
    assert!(o.status.success(), "{}", stderr(&o));
    let ok_pdf = squash(&pdf_text_file(&dir.path().join("bench/ok.pdf")));
    assert!(ok_pdf.contains("CAL-1204") && !ok_pdf.contains("CAL-0991"));
    assert!(ok_pdf.contains("2027-09-20"), "the due date of CAL-1204");
    assert!(
        ok_pdf.contains("Inventedcalibrationbench"),
        "the lab's name in the header"
    );
    let gap_pdf = squash(&pdf_text_file(&dir.path().join("bench/gap.pdf")));
    assert!(gap_pdf.contains("CAL-0991") && gap_pdf.contains("(overdue)"));
}

#[test]
fn the_derating_policy_of_the_register_is_used_and_printed() {
    // R1 (2.2 kΩ, rated 2 mW) dissipates at most VR²/R = 1.4234² / 2200 = 0.921 mW (Joule's
    // law, handbook formula; worked by hand from the 3200 Hz row). That is within the common
    // practice limit of 50 % (1 mW) and over the register's 40 % (0.8 mW).
    let dir = tempfile::tempdir().unwrap();
    tree(
        dir.path(),
        REGISTER,
        &[("nb.md", notebook("LR-5", "2026-10-05", "DMM-08", ""))],
    );
    let nb = dir.path().join("bench/nb.md");
    let o = run(&["build", s(&nb)]);
    assert!(o.status.success(), "{}", stderr(&o));
    let text = squash(&pdf_text_file(&nb.with_extension("pdf")));
    assert!(
        text.contains("Deratingpolicy,fromthelabregister'spolicy(lab.yaml):resistorsatmost40%ofratedpower,capacitors60%ofratedvoltage,coils70%ofratedcurrent."),
        "{text}"
    );
    assert!(text.contains("EXCEEDSLIMIT"), "{text}");

    // The same notebook with its own meter and no register: the 50 % of common practice.
    let alone = tempfile::tempdir().unwrap();
    let own = "instruments:\n  DMM-08:\n    accuracy: 1%\n";
    let nb2 = alone.path().join("nb.md");
    std::fs::write(&nb2, notebook("LR-5", "2026-10-05", "DMM-08", own)).unwrap();
    let o = run(&["build", s(&nb2)]);
    assert!(o.status.success(), "{}", stderr(&o));
    let text = squash(&pdf_text_file(&nb2.with_extension("pdf")));
    assert!(
        text.contains("Deratingpolicy,fromcommonbenchpractice:resistorsatmost50%"),
        "{text}"
    );
    assert!(!text.contains("EXCEEDSLIMIT") && text.contains("withinlimit"));
}

#[test]
fn a_changed_entry_voids_the_records_that_rely_on_it_and_verify_names_it() {
    let dir = tempfile::tempdir().unwrap();
    let inline = "instruments:\n  dmm:\n    accuracy: 0.5% + 2\n    resolution: 0.1 mV\n";
    // Without defaults first: a derating policy applies to every notebook with rated parts.
    let (entries, policy) = REGISTER.split_once("defaults:").unwrap();
    tree(
        dir.path(),
        entries,
        &[
            ("uses.md", notebook("LR-6", "2026-10-05", "DMM-07", "")),
            ("inline.md", notebook("LR-7", "2026-10-05", "dmm", inline)),
        ],
    );
    let uses = dir.path().join("bench/uses.md");
    let inline_nb = dir.path().join("bench/inline.md");
    // The inline notebook signed before any register applied keeps its digest under one.
    std::fs::rename(dir.path().join("lab.yaml"), dir.path().join("away.yaml")).unwrap();
    let o = run(&[
        "sign",
        s(&inline_nb),
        "--by",
        "R. Viewer",
        "--on",
        "2026-10-06T09:00:00Z",
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    std::fs::rename(dir.path().join("away.yaml"), dir.path().join("lab.yaml")).unwrap();
    let o = run(&[
        "sign",
        s(&uses),
        "--by",
        "R. Viewer",
        "--on",
        "2026-10-06T09:00:00Z",
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    let o = run(&["build", s(&dir.path().join("bench"))]);
    assert!(o.status.success(), "{}", stderr(&o));
    let verify = |p: &Path| stdout(&run(&["verify", s(p)]));
    for p in [&uses, &inline_nb] {
        assert!(verify(p).starts_with("name only"), "{}", verify(p));
    }

    // An entry neither notebook uses changes: nothing is voided.
    let reg = std::fs::read_to_string(dir.path().join("lab.yaml")).unwrap();
    let spare = reg.replace("    accuracy: 1%\n", "    accuracy: 2%\n");
    assert_ne!(spare, reg);
    std::fs::write(dir.path().join("lab.yaml"), &spare).unwrap();
    for p in [&uses, &inline_nb, &uses.with_extension("pdf")] {
        assert!(verify(p).starts_with("name only"), "{}", verify(p));
    }

    // The entry `uses.md` relies on changes: its record is void and verify names the entry,
    // for the notebook and for its PDF; the inline notebook is untouched.
    let changed = spare.replace("accuracy: 0.5% + 2", "accuracy: 0.6% + 2");
    std::fs::write(dir.path().join("lab.yaml"), &changed).unwrap();
    for p in [&uses, &uses.with_extension("pdf")] {
        let v = verify(p);
        assert!(v.starts_with("void"), "{v}");
        assert!(
            v.contains(
                "the lab register entry `DMM-07` that the record relies on changed after signing"
            ),
            "{v}"
        );
    }
    assert!(verify(&inline_nb).starts_with("name only"));
    let o = run(&["verify", s(&dir.path().join("bench"))]);
    let out = stdout(&o);
    assert!(out.contains("void") && out.contains("`DMM-07`"), "{out}");

    // A derating policy added to the register changes the limits R1 is judged against, so
    // it voids the inline record too, and verify says it was the register's defaults.
    std::fs::write(
        dir.path().join("lab.yaml"),
        format!("{changed}defaults:{policy}"),
    )
    .unwrap();
    let v = verify(&inline_nb);
    assert!(
        v.starts_with("void") && v.contains("the lab register entry `(defaults)`"),
        "{v}"
    );
}

#[test]
fn a_broken_register_is_reported_once_at_its_own_line() {
    let dir = tempfile::tempdir().unwrap();
    // The second calibration's flow mapping is never closed (line 9).
    let broken = REGISTER.replace("certificate: CAL-1204}", "certificate: CAL-1204");
    let nbs: Vec<(&str, String)> = ["a.md", "b.md", "c.md"]
        .iter()
        .enumerate()
        .map(|(i, n)| {
            (
                *n,
                notebook(&format!("LR-8{i}"), "2026-10-05", "DMM-07", ""),
            )
        })
        .collect();
    tree(dir.path(), &broken, &nbs);
    // `check` and `results` on the folder say it once too, and name what they did not do.
    for (verb, done) in [("check", "not checked"), ("results", "not read")] {
        let o = run(&[verb, s(&dir.path().join("bench"))]);
        assert!(!o.status.success());
        let err = stderr(&o);
        assert_eq!(
            err.matches("lab register is never closed").count(),
            1,
            "{err}"
        );
        assert_eq!(err.matches(done).count(), 2, "{verb}: {err}");
    }
    let o = run(&["build", s(&dir.path().join("bench"))]);
    assert!(!o.status.success());
    // The diagnostics, without the status lines (`FAILED …`) that summarise them.
    let err: String = stderr(&o)
        .lines()
        .filter(|l| !l.starts_with("FAILED"))
        .map(|l| format!("{l}\n"))
        .collect();
    let at = format!("{}:9:9", dir.path().join("lab.yaml").display());
    let canon = format!(
        "{}:9:9",
        dir.path()
            .canonicalize()
            .unwrap()
            .join("lab.yaml")
            .display()
    );
    let n = err.matches(&at).count().max(err.matches(&canon).count());
    assert_eq!(n, 1, "{err}");
    assert!(err.contains("lab register is never closed"), "{err}");
    assert_eq!(err.matches("it uses is broken").count(), 2, "{err}");
    assert!(stderr(&o).contains("0 built, 0 up to date, 0 skipped, 3 failed"));
}

//! The parse stage: every error kind points at the exact line and column, and a well-formed
//! notebook (BOM, CRLF, tabs, comments, both table styles, repeats) parses completely.
//! All values are invented for these tests.

use benchrec::diag::{self, line_col, Diagnostic};
use benchrec::notebook::{
    self, Accuracy, Decision, Distribution, Item, Network, PartKind, Tolerance,
};
use benchrec::quantity::Unit;

/// Front matter of 11 lines; line 12 is the closing `---`, line 13 blank, block fence on 14.
const FRONT: &str = "---
record: T-1
title: Synthetic checks
date: 2026-05-04
operator: Q. Operator
instruments:
  dmm: {what: meter, accuracy: 1% + 2, resolution: 1 mV}
  scope: {what: scope, reading: 0.1 div}
parts:
  R1: {kind: resistor, nominal: 1.5 kohm, tolerance: 1%}
  C1: {kind: capacitor, nominal: 68 nF, tolerance: J}
---
";

/// A notebook with one readings block whose body starts on line 15.
fn nb(body: &str) -> String {
    format!("{FRONT}\n```readings\n{body}```\n")
}

fn errors(src: &str) -> Vec<Diagnostic> {
    match notebook::parse(src) {
        Ok(_) => panic!("expected errors for:\n{src}"),
        Err(d) => d,
    }
}

/// Asserts one diagnostic whose message contains `msg`, at (line, col).
fn expect_at(src: &str, msg: &str, line: usize, col: usize) -> Diagnostic {
    let ds = errors(src);
    let text = diag::render("t.md", src, &ds);
    let hits: Vec<&Diagnostic> = ds.iter().filter(|d| d.message.contains(msg)).collect();
    assert!(
        !hits.is_empty(),
        "no diagnostic containing {msg:?}; got:\n{text}"
    );
    let d = hits[0];
    assert_eq!(
        line_col(src, d.span.start),
        (line, col),
        "position of {msg:?}; got:\n{text}"
    );
    d.clone()
}

const RC_OK: &str = "id: b1
network: RC
parts: [R1, C1]
meter: dmm
---
f/Hz  VR/V  VC/V
300   0.41  1.90
";

#[test]
fn baseline_block_parses() {
    // The fixture itself must be valid, or every test below would pass for the wrong reason.
    let n = notebook::parse(&nb(RC_OK))
        .unwrap_or_else(|d| panic!("{}", diag::render("t.md", &nb(RC_OK), &d)));
    assert_eq!(n.front.parts.len(), 2);
}

// --- front matter ------------------------------------------------------------------------

#[test]
fn missing_front_matter() {
    let d = expect_at("# Title\n\ntext\n", "starts with its front matter", 1, 1);
    assert!(d.expected.unwrap().contains("`---`"));
}

#[test]
fn unclosed_front_matter() {
    expect_at("---\nrecord: x\ntitle: y\n", "never closed", 1, 1);
}

#[test]
fn front_matter_yaml_syntax() {
    // `title: Run 2: sweep` is a YAML error: mapping value inside a plain scalar (line 3).
    let src = "---\nrecord: a\ntitle: Run 2: sweep\ndate: 2026-05-04\noperator: o\n---\n";
    let d = expect_at(src, "not valid YAML", 3, 13);
    assert!(d.help.unwrap().contains("quote"));
}

#[test]
fn front_matter_tab_indent() {
    let src = "---\nrecord: a\ntitle: t\ndate: 2026-05-04\noperator: o\nparts:\n\tR1: {kind: resistor}\n---\n";
    let d = expect_at(src, "not valid YAML", 7, 1);
    assert!(d.help.unwrap().contains("spaces"));
}

#[test]
fn missing_required_key() {
    let src = "---\nrecord: a\ntitle: t\ndate: 2026-05-04\n---\n";
    expect_at(src, "lacks `operator`", 1, 1);
}

#[test]
fn bad_date() {
    let src = "---\nrecord: a\ntitle: t\ndate: 2026-02-30\noperator: o\n---\n";
    let d = expect_at(src, "`date` is not a date", 4, 7);
    assert!(d.expected.unwrap().contains("YYYY-MM-DD"));
    let src = "---\nrecord: a\ntitle: t\ndate: 4 May 2026\noperator: o\n---\n";
    expect_at(src, "`date` is not a date", 4, 7);
}

#[test]
fn unknown_front_key_lists_known_keys() {
    let src = "---\nrecord: a\ntitel: t\ndate: 2026-05-04\noperator: o\n---\n";
    let d = expect_at(src, "unknown key `titel`", 3, 1);
    assert!(d.expected.unwrap().contains("`title`"));
    assert_eq!(d.help.as_deref(), Some("did you mean `title`?"));
}

#[test]
fn coverage_out_of_range() {
    let src = "---\nrecord: a\ntitle: t\ndate: 2026-05-04\noperator: o\ncoverage: 95\n---\n";
    expect_at(src, "coverage probability out of range", 6, 11);
}

#[test]
fn coverage_accepts_percent() {
    let src = "---\nrecord: a\ntitle: t\ndate: 2026-05-04\noperator: o\ncoverage: 99%\n---\n";
    let n = notebook::parse(src).unwrap();
    assert!((n.front.coverage - 0.99).abs() < 1e-12);
    assert_eq!(n.front.decision, Decision::Guarded);
}

#[test]
fn unknown_decision_rule() {
    let src = "---\nrecord: a\ntitle: t\ndate: 2026-05-04\noperator: o\ndecision: strict\n---\n";
    expect_at(src, "unknown decision rule", 6, 11);
}

#[test]
fn unknown_instrument_key() {
    let src = "---\nrecord: a\ntitle: t\ndate: 2026-05-04\noperator: o\ninstruments:\n  dmm:\n    what: m\n    acuracy: 1%\n---\n";
    let d = expect_at(src, "unknown key `acuracy`", 9, 5);
    assert_eq!(d.help.as_deref(), Some("did you mean `accuracy`?"));
}

#[test]
fn bad_accuracy() {
    let src = "---\nrecord: a\ntitle: t\ndate: 2026-05-04\noperator: o\ninstruments:\n  dmm:\n    accuracy: 0.5% plus 3\n---\n";
    expect_at(src, "`+ N` counts", 8, 20);
}

#[test]
fn normal_distribution_needs_k() {
    let src = "---\nrecord: a\ntitle: t\ndate: 2026-05-04\noperator: o\ninstruments:\n  dmm:\n    accuracy: 2 mV\n    distribution: normal\n---\n";
    expect_at(src, "needs its coverage factor", 9, 19);
}

#[test]
fn unknown_part_kind() {
    let src = "---\nrecord: a\ntitle: t\ndate: 2026-05-04\noperator: o\nparts:\n  X1:\n    kind: resistr\n---\n";
    let d = expect_at(src, "unknown part kind", 8, 11);
    assert_eq!(d.help.as_deref(), Some("did you mean `resistor`?"));
}

#[test]
fn zero_or_negative_resistance() {
    let src = "---\nrecord: a\ntitle: t\ndate: 2026-05-04\noperator: o\nparts:\n  R9:\n    kind: resistor\n    nominal: 0 ohm\n    measured: -12 ohm\n---\n";
    expect_at(src, "nominal value must be greater than zero", 9, 14);
    expect_at(src, "measured value must be greater than zero", 10, 15);
}

#[test]
fn nominal_with_wrong_unit() {
    let src = "---\nrecord: a\ntitle: t\ndate: 2026-05-04\noperator: o\nparts:\n  C7: {kind: capacitor, nominal: 3.3 mH}\n---\n";
    expect_at(src, "`nominal` has the wrong unit", 7, 34);
}

#[test]
fn bad_tolerance_letter() {
    let src = "---\nrecord: a\ntitle: t\ndate: 2026-05-04\noperator: o\nparts:\n  R2:\n    kind: resistor\n    tolerance: Q\n---\n";
    let d = expect_at(src, "not an IEC 60062 tolerance letter", 9, 16);
    assert!(d.expected.unwrap().contains("B C D F G J K M"));
}

#[test]
fn iec_60062_letters() {
    // IEC 60062:2016 Table 8 (from memory): F = ±1 %, J = ±5 %, M = ±20 %.
    let src = "---\nrecord: a\ntitle: t\ndate: 2026-05-04\noperator: o\nparts:\n  Ra: {kind: resistor, tolerance: F}\n  Cb: {kind: capacitor, tolerance: J}\n  Lc: {kind: inductor, tolerance: M}\n---\n";
    let n = notebook::parse(src).unwrap();
    assert_eq!(
        n.front.parts["Ra"].tolerance,
        Some(Tolerance::Code('F', 0.01))
    );
    assert_eq!(
        n.front.parts["Cb"].tolerance,
        Some(Tolerance::Code('J', 0.05))
    );
    assert_eq!(
        n.front.parts["Lc"].tolerance,
        Some(Tolerance::Code('M', 0.20))
    );
}

#[test]
fn by_names_undefined_instrument() {
    let src = "---\nrecord: a\ntitle: t\ndate: 2026-05-04\noperator: o\ninstruments:\n  dmm: {what: m}\nparts:\n  R3:\n    kind: resistor\n    measured: 820 ohm\n    by: lcr\n---\n";
    let d = expect_at(src, "instrument `lcr` is not defined", 12, 9);
    assert!(d.expected.unwrap().contains("`dmm`"));
}

#[test]
fn deeply_nested_yaml_is_refused() {
    let deep = format!(
        "---\nrecord: a\ntitle: t\ndate: 2026-05-04\noperator: o\nlab: {}{}\n---\n",
        "[".repeat(5000),
        "]".repeat(5000)
    );
    let t = std::time::Instant::now();
    let ds = errors(&deep);
    assert!(t.elapsed().as_secs() < 5);
    assert!(
        ds.iter().any(|d| d.message.contains("too deeply")),
        "{ds:?}"
    );
    assert_eq!(line_col(&deep, ds[0].span.start).0, 6);
    // Block-indentation nesting past serde_yaml's recursion limit (128).
    let mut s = String::from("---\nrecord: a\ntitle: t\ndate: 2026-05-04\noperator: o\nlab:\n");
    for i in 0..200 {
        s.push_str(&format!("{}k{i}:\n", " ".repeat(2 * (i + 1))));
    }
    s.push_str("---\n");
    let ds = errors(&s);
    assert!(
        ds.iter().any(|d| d.message.contains("nests too deeply")),
        "{ds:?}"
    );
}

#[test]
fn alias_bomb_is_refused() {
    let mut s = String::from("---\nrecord: a\ntitle: t\ndate: 2026-05-04\noperator: o\nx0: &a0 [z, z, z, z, z, z, z, z, z, z]\n");
    for i in 1..10 {
        let p = i - 1;
        s.push_str(&format!(
            "x{i}: &a{i} [*a{p}, *a{p}, *a{p}, *a{p}, *a{p}, *a{p}, *a{p}, *a{p}, *a{p}, *a{p}]\n"
        ));
    }
    s.push_str("---\n");
    let t = std::time::Instant::now();
    let ds = errors(&s);
    assert!(t.elapsed().as_secs() < 5);
    assert!(ds.iter().any(|d| d.message.contains("aliases")), "{ds:?}");
}

// --- readings block header ---------------------------------------------------------------

#[test]
fn unknown_network() {
    let src = nb("id: b1\nnetwork: LC\n---\nf/Hz VR/V\n100 1\n");
    let d = expect_at(&src, "unknown network `LC`", 16, 10);
    assert!(d.expected.unwrap().contains("`RLC`"));
}

#[test]
fn unknown_header_key() {
    let src = nb("id: b1\nnetwork: RC\nmetre: dmm\n---\nf/Hz VR/V VC/V\n100 1 1\n");
    let d = expect_at(&src, "unknown key `metre`", 17, 1);
    assert_eq!(d.help.as_deref(), Some("did you mean `meter`?"));
}

#[test]
fn missing_id() {
    let src = nb("network: RC\n---\nf/Hz VR/V VC/V\n100 1 1\n");
    expect_at(&src, "lacks `id`", 14, 1);
}

#[test]
fn duplicate_block_id() {
    let src = format!(
        "{}\n```readings\nid: b1\nnetwork: RC\n---\nf/Hz VR/V VC/V\n90 1 1\n```\n",
        nb(RC_OK)
    );
    // First block closes on line 22, line 23 is blank, the second fence is on 24, its id on 25.
    let d = expect_at(&src, "block id `b1` is used twice", 25, 5);
    assert!(d.help.unwrap().contains("line 15"));
    // Also when the first block is wrong elsewhere (an unknown network).
    let src = src.replacen("network: RC", "network: CR", 1);
    expect_at(&src, "block id `b1` is used twice", 25, 5);
}

#[test]
fn undefined_part_in_header() {
    let src = nb("id: b1\nnetwork: RC\nparts: [R1, C2]\n---\nf/Hz VR/V VC/V\n100 1 1\n");
    let d = expect_at(&src, "part `C2` is not defined", 17, 13);
    assert_eq!(d.help.as_deref(), Some("did you mean `C1`?"));
}

#[test]
fn undefined_part_block_list() {
    let src = nb("id: b1\nnetwork: RC\nparts:\n  - R1\n  - Cx\n---\nf/Hz VR/V VC/V\n100 1 1\n");
    expect_at(&src, "part `Cx` is not defined", 19, 5);
}

#[test]
fn undefined_meter() {
    let src = nb("id: b1\nnetwork: RC\nmeter: fluke\nphase: scope\n---\nf/Hz VR/V VC/V\n100 1 1\n");
    expect_at(&src, "instrument `fluke` is not defined", 17, 8);
}

#[test]
fn block_without_separator() {
    let src = nb("id: b1\nnetwork: RC\nf/Hz VR/V VC/V\n");
    expect_at(&src, "lacks the `---` line", 14, 1);
}

#[test]
fn unclosed_readings_block() {
    let src = format!(
        "{FRONT}\ntext\n\n```readings\nid: b1\nnetwork: RC\n---\nf/Hz VR/V VC/V\n100 1 1\n"
    );
    expect_at(&src, "never closed", 16, 1);
}

#[test]
fn nested_readings_block() {
    let src = format!("{FRONT}\n- item\n\n  ```readings\n  id: b1\n  ```\n");
    expect_at(&src, "inside a list", 16, 3);
}

// --- readings table ----------------------------------------------------------------------

#[test]
fn missing_columns_for_network() {
    let src = nb("id: b1\nnetwork: RL\n---\nf/Hz  VR/V\n100 1\n");
    let d = expect_at(&src, "RL block lacks columns `Vs`, `VL`", 18, 1);
    assert!(d.found.unwrap().contains("`f`"));
}

#[test]
fn shift_without_period() {
    let src = nb("id: b1\nnetwork: RC\n---\nf/Hz VR/V VC/V shift/div\n100 1 1 0.5\n");
    expect_at(&src, "`shift` needs a `period`", 18, 16);
}

#[test]
fn unknown_column_symbol() {
    let src = nb("id: b1\nnetwork: RC\n---\nf/Hz Vr/V VC/V\n100 1 1\n");
    let d = expect_at(&src, "unknown column `Vr`", 18, 6);
    assert_eq!(d.help.as_deref(), Some("did you mean `VR`?"));
}

#[test]
fn duplicate_column() {
    let src =
        nb("id: b1\nnetwork: RC\n---\n| f/Hz | VR/V | VC/V | VR (mV) |\n| 100 | 1 | 1 | 1 |\n");
    expect_at(&src, "column `VR` appears twice", 18, 24);
}

#[test]
fn column_unit_of_wrong_dimension() {
    let src = nb("id: b1\nnetwork: RC\n---\nf/ms VR/V VC/V\n100 1 1\n");
    let d = expect_at(&src, "column `f` cannot be in `ms`", 18, 3);
    assert!(d.expected.unwrap().contains("hertz"));
}

#[test]
fn heading_without_unit() {
    let src = nb("id: b1\nnetwork: RC\n---\nf VR/V VC/V\n100 1 1\n");
    expect_at(&src, "has no unit", 18, 1);
}

#[test]
fn unknown_prefix_in_heading() {
    let src = nb("id: b1\nnetwork: RC\n---\nf/KHz VR/V VC/V\n1 1 1\n");
    let d = expect_at(&src, "unknown SI prefix `K` in `KHz`", 18, 3);
    assert_eq!(d.help.as_deref(), Some("kilo is a lower-case `k`"));
}

#[test]
fn ragged_row() {
    let src = nb("id: b1\nnetwork: RC\n---\nf/Hz VR/V VC/V\n100 1 1\n  200 1\n");
    let d = expect_at(&src, "row has 2 cells but the table has 3 columns", 20, 3);
    assert_eq!(d.expected.as_deref(), Some("3 cells"));
    assert_eq!(d.found.as_deref(), Some("2 cells"));
}

#[test]
fn non_numeric_cell() {
    let src =
        nb("id: b1\nnetwork: RC\n---\n| f/Hz | VR/V | VC/V |\n|---|---|---|\n| 100 | abc | 1 |\n");
    expect_at(&src, "column `VR`: not a number", 20, 9);
}

#[test]
fn nan_and_inf_cells() {
    let src = nb("id: b1\nnetwork: RC\n---\nf/Hz VR/V VC/V\n100 NaN 1\n200 1 -inf\n");
    let ds = errors(&src);
    let pos: Vec<(usize, usize)> = ds
        .iter()
        .filter(|d| d.message.contains("not a finite number"))
        .map(|d| line_col(&src, d.span.start))
        .collect();
    assert_eq!(pos, vec![(19, 5), (20, 7)]);
}

#[test]
fn zero_frequency() {
    let src = nb("id: b1\nnetwork: RC\n---\nf/Hz VR/V VC/V\n0 1 1\n");
    expect_at(&src, "frequency must be greater than zero", 19, 1);
}

#[test]
fn zero_period() {
    let src = nb("id: b1\nnetwork: RC\n---\nf/Hz VR/V VC/V shift/div period/div\n100 1 1 0.4 0\n");
    expect_at(&src, "period must be greater than zero", 19, 13);
}

#[test]
fn negative_magnitude() {
    let src = nb("id: b1\nnetwork: RC\n---\nf/Hz VR/V VC/V\n100 -1 1\n");
    expect_at(&src, "cannot be negative", 19, 5);
}

#[test]
fn block_with_no_rows() {
    let src =
        nb("id: b1\nnetwork: RC\n---\nf/Hz VR/V VC/V   # heading only\n\n# nothing measured\n");
    expect_at(&src, "has no rows", 18, 1);
}

#[test]
fn block_with_no_table() {
    let src = nb("id: b1\nnetwork: RC\n---\n");
    expect_at(&src, "has no table", 17, 1);
}

#[test]
fn unknown_unit_in_cell() {
    let src = nb("id: b1\nnetwork: RC\n---\nf/Hz VR/V VC/V\n100 1 1\n150 2furlong 1\n");
    expect_at(&src, "unknown unit `furlong`", 20, 6);
}

#[test]
fn cell_unit_of_wrong_dimension() {
    let src = nb("id: b1\nnetwork: RC\n---\n| f/Hz | VR/V | VC/V |\n| 100 | 4 mA | 1 |\n");
    let d = expect_at(&src, "does not fit here", 19, 11);
    assert!(d.expected.unwrap().contains("volts"));
}

#[test]
fn decimal_comma_cell() {
    let src = nb("id: b1\nnetwork: RC\n---\nf/Hz VR/V VC/V\n100 0,5 1\n");
    expect_at(&src, "decimal comma", 19, 6);
}

#[test]
fn all_problems_in_one_pass() {
    // Three bad blocks and a bad front matter key: every problem is reported.
    let front = FRONT.replace(
        "operator: Q. Operator\n",
        "operator: Q. Operator\nlott: 7\n",
    );
    let src = format!(
        "{front}\n```readings\nid: a\nnetwork: RC\n---\nf/Hz VR/V VC/V\nx 1 1\n1 y 1\n```\n\n```readings\nid: b\nnetwork: Q\n---\nf/Hz VR/V\n1 1\n```\n\n```readings\nid: c\nnetwork: Z\n---\nV/V I/A\n1 1\n```\n"
    );
    let ds = errors(&src);
    let msgs: Vec<&str> = ds.iter().map(|d| d.message.as_str()).collect();
    for want in [
        "unknown key `lott`",
        "column `f`: not a number",
        "column `VR`: not a number",
        "unknown network `Q`",
        "Z block lacks column `phi`",
    ] {
        assert!(
            msgs.iter().any(|m| m.contains(want)),
            "missing {want:?} in {msgs:?}"
        );
    }
}

#[test]
fn rendered_diagnostic_names_file_line_col() {
    let src = nb("id: b1\nnetwork: RC\n---\nf/Hz VR/V VC/V\n100 1 1\n150 2 xx\n");
    let ds = errors(&src);
    let out = diag::render("bench/run.md", &src, &ds);
    assert!(out.contains("bench/run.md:20:7"), "{out}");
    assert!(out.contains("150 2 xx"), "{out}");
    assert!(
        out.contains("expected: ") && out.contains("found: `xx`"),
        "{out}"
    );
    let one = diag::one_line("bench/run.md", &src, &ds[0]);
    assert!(
        one.starts_with("bench/run.md:20:7: column `VC`: not a number (expected "),
        "{one}"
    );
}

// --- the happy path ----------------------------------------------------------------------

const GOOD: &str = "\u{FEFF}---
record: BR-2026-017
title: Filter board checks
date: 2026-11-30
operator: A. Tester
lab: Bench 4
lot: 0042
coverage: 95%
decision: simple
instruments:
  dmm:
    what: bench multimeter   # handheld is spare
    accuracy: 0.5% + 3
    resolution: 1 mV
    bandwidth: 20 kHz
    calibrated: 2026-02-01
    due: 2027-02-01
  scope:
    what: two-channel oscilloscope
    reading: 0.1 div
    accuracy: 0.02 div
    distribution: normal
    k: 2
parts:
  R1: {kind: resistor, nominal: 680 ohm, tolerance: F, measured: 678.2 ohm, by: dmm, rating: 0.25 W}
  C1:
    kind: capacitor
    nominal: 0.33 µF
    tolerance: ±5%
    rating: 50 V
  L1:
    kind: inductor
    nominal: 47 mH
    tolerance: 2.5 mH
    dcr: {value: 38.5 ohm, by: dmm}
    rating: 0.2 A
---

# Filter checks

A pipe table in prose is prose:

| a | b |
|---|---|
| 1 | 2 |

```python
print(\"not a readings block\")
```

```readings
id: rc-sweep   # the first sweep
network: RC
parts: [R1, C1]
meter: dmm
phase: scope
source: 2.5 V
---
| f/Hz    | VR/V | VC (V)  | shift/div | period/div |
|---------|------|---------|-----------|------------|
| 200     | 0.66 | 2.41    | 1.2       | 10         |   # low end
| 1.5 kHz | 2.28 | 1020 mV | 0.3       | 6.6        |

| 1.5e3   | 2.27 | 1.01    | 0.3       | 6.6        |
```

Between the blocks.

~~~readings
id: rl-check
network: RL
parts:
  - R1
  - L1
meter: dmm
note: coil on the test jig
---
# comment line
f/Hz\tVs/V\tVR/mV\tVL/V
400\t2.50\t1510\t1.62
400\t2.50\t1512\t1.61   # repeat
2000 Hz\t2.5\t640\t2.3
~~~

```readings
id: z-direct
network: Z
meter: dmm
---
V/V    I/mA   phi/deg
1.20   1.75   -38.5
1.20   1.76   -38.0
```
The end.
";

#[test]
fn happy_path_notebook() {
    let src = GOOD.replace('\n', "\r\n");
    let n =
        notebook::parse(&src).unwrap_or_else(|d| panic!("{}", diag::render("good.md", &src, &d)));
    assert!(!n.source.starts_with('\u{FEFF}'));
    let f = &n.front;
    assert_eq!(f.record, "BR-2026-017");
    assert_eq!(f.lot.as_deref(), Some("0042"));
    assert_eq!(
        f.date,
        chrono::NaiveDate::from_ymd_opt(2026, 11, 30).unwrap()
    );
    assert!((f.coverage - 0.95).abs() < 1e-12);
    assert_eq!(f.decision, Decision::Simple);
    let dmm = &f.instruments["dmm"];
    assert_eq!(dmm.what.as_deref(), Some("bench multimeter"));
    assert_eq!(
        dmm.accuracy,
        Some(Accuracy::Relative {
            fraction: 0.005,
            counts: 3.0
        })
    );
    assert_eq!(dmm.bandwidth, Some(20e3));
    let scope = &f.instruments["scope"];
    assert_eq!(scope.distribution, Distribution::Normal { k: 2.0 });
    assert!(
        matches!(scope.accuracy, Some(Accuracy::Absolute(q)) if q.unit == Unit::Div && (q.value - 0.02).abs() < 1e-15)
    );
    let r1 = &f.parts["R1"];
    assert_eq!(r1.kind, PartKind::Resistor);
    assert_eq!(r1.measured_by.as_deref(), Some("dmm"));
    assert!((r1.measured.unwrap().value - 678.2).abs() < 1e-9);
    let c1 = &f.parts["C1"];
    assert!((c1.nominal.unwrap().value - 0.33e-6).abs() < 1e-18);
    assert_eq!(c1.tolerance, Some(Tolerance::Relative(0.05)));
    let l1 = &f.parts["L1"];
    assert_eq!(l1.dcr_by.as_deref(), Some("dmm"));
    assert!(matches!(l1.tolerance, Some(Tolerance::Absolute(a)) if (a - 2.5e-3).abs() < 1e-15));

    let blocks: Vec<_> = n
        .items
        .iter()
        .filter_map(|i| {
            if let Item::Readings(b) = i {
                Some(b)
            } else {
                None
            }
        })
        .collect();
    assert_eq!(blocks.len(), 3);
    // Prose: before the first block (with the python fence), between the first two, after the
    // last; the blank run between the last two blocks is not an item.
    let prose: Vec<&str> = n
        .items
        .iter()
        .filter_map(|i| {
            if let Item::Prose { text, .. } = i {
                Some(text.as_str())
            } else {
                None
            }
        })
        .collect();
    assert_eq!(prose.len(), 3);
    assert!(prose[0].contains("print(\"not a readings block\")") && prose[0].contains("| 1 | 2 |"));
    assert!(prose[1].contains("Between the blocks.") && prose[2].contains("The end."));
    for it in &n.items {
        if let Item::Prose { text, span, .. } = it {
            assert_eq!(
                &n.source[span.start..span.end],
                text.as_str(),
                "prose is verbatim"
            );
        }
    }

    let rc = blocks[0];
    assert_eq!(rc.id, "rc-sweep");
    assert_eq!(rc.network, Network::RC);
    assert_eq!(rc.source, Some(2.5));
    assert_eq!(
        rc.parts.iter().map(|p| p.name.as_str()).collect::<Vec<_>>(),
        ["R1", "C1"]
    );
    assert_eq!(
        rc.columns
            .iter()
            .map(|c| c.symbol.as_str())
            .collect::<Vec<_>>(),
        ["f", "VR", "VC", "shift", "period"]
    );
    assert_eq!(rc.rows.len(), 3);
    let vc = rc.col("VC").unwrap();
    assert!((rc.rows[1].cells[vc].value - 1.02).abs() < 1e-12);
    assert!((rc.rows[1].cells[0].value - 1500.0).abs() < 1e-9);
    assert_eq!(rc.rows[1].cells[0].text, "1.5 kHz");
    // Spans: the block covers its fences; the body is verbatim; every cell span holds its text.
    assert!(n.source[rc.span.start..rc.span.end].starts_with("```readings"));
    assert!(n.source[rc.span.start..rc.span.end].ends_with("```"));
    assert!(rc.body.starts_with("id: rc-sweep") && rc.body.contains("| 1.5e3"));
    assert_eq!(&n.source[rc.id_span.start..rc.id_span.end], "rc-sweep");
    for b in &blocks {
        for row in &b.rows {
            assert_eq!(row.cells.len(), b.columns.len());
            for c in &row.cells {
                assert_eq!(&n.source[c.span.start..c.span.end], c.text);
            }
        }
    }
    let cell = &rc.rows[1].cells[vc];
    // Line 62 of GOOD holds `| 1.5 kHz | 2.28 | 1020 mV |`; the BOM is not a column.
    assert_eq!(line_col(&n.source, cell.span.start), (62, 20));

    let rl = blocks[1];
    assert_eq!(rl.network, Network::RL);
    assert_eq!(rl.note.as_deref(), Some("coil on the test jig"));
    assert_eq!(rl.rows.len(), 3);
    let vr = rl.col("VR").unwrap();
    assert!(
        (rl.rows[0].cells[vr].value - 1.510).abs() < 1e-12,
        "VR/mV column scales bare numbers"
    );
    assert_eq!(rl.rows[2].cells[0].text, "2000 Hz");
    assert_eq!(
        rl.rows[0].cells[0].value, rl.rows[1].cells[0].value,
        "repeat observations keep their f"
    );

    let z = blocks[2];
    let phi = z.col("phi").unwrap();
    assert!((z.rows[0].cells[phi].value + 38.5_f64.to_radians()).abs() < 1e-12);
    assert!((z.rows[0].cells[z.col("I").unwrap()].value - 1.75e-3).abs() < 1e-15);
}

#[test]
fn no_input_panics() {
    // Every prefix of a valid notebook, cut at each char boundary, parses or fails cleanly.
    let src = GOOD.replace('\n', "\r\n");
    let mut cuts: Vec<usize> = src.char_indices().map(|(i, _)| i).collect();
    cuts.push(src.len());
    for &c in &cuts {
        let part = &src[..c];
        if let Err(ds) = notebook::parse(part) {
            assert!(!ds.is_empty());
            let parsed = part.strip_prefix('\u{FEFF}').unwrap_or(part);
            for d in &ds {
                assert!(
                    d.span.start <= d.span.end && d.span.end <= parsed.len(),
                    "{d:?} at cut {c}"
                );
                assert!(
                    parsed.is_char_boundary(d.span.start) && parsed.is_char_boundary(d.span.end)
                );
            }
            let _ = diag::render("cut.md", parsed, &ds);
        }
    }
    // Odd bytes in odd places.
    for junk in [
        "\u{0}",
        "|",
        "||||",
        "µ",
        "\t",
        "```",
        "~~~readings",
        "---",
        "#",
        "(",
        "/",
        "1e",
        "-",
        "Ω",
    ] {
        let s = nb(&format!(
            "id: j\nnetwork: RC\n---\nf/Hz VR/V VC/V {junk}\n{junk} 1 {junk}\n"
        ));
        let _ = notebook::parse(&s);
        let s2 = format!("---\n{junk}: {junk}\n---\n{junk}");
        let _ = notebook::parse(&s2);
    }
}

#[test]
fn oversized_front_matter_and_header() {
    let big = format!(
        "---\nrecord: a\ntitle: t\ndate: 2026-05-04\noperator: o\nlab: \"{}\"\n---\n",
        "x".repeat(70_000)
    );
    expect_at(&big, "front matter is too long", 1, 1);
    let src = nb(&format!(
        "id: b1\nnetwork: RC\nnote: \"{}\"\n---\nf/Hz VR/V VC/V\n100 1 1\n",
        "y".repeat(20_000)
    ));
    expect_at(&src, "header is too long", 14, 1);
}

#[test]
fn unknown_prefix_in_front_matter() {
    let src = "---\nrecord: a\ntitle: t\ndate: 2026-05-04\noperator: o\nparts:\n  R4:\n    kind: resistor\n    nominal: 4.7 Kohm\n---\n";
    let d = expect_at(src, "unknown SI prefix `K`", 9, 18);
    assert_eq!(d.help.as_deref(), Some("kilo is a lower-case `k`"));
}

#[test]
fn dcr_only_on_inductors() {
    let src = "---\nrecord: a\ntitle: t\ndate: 2026-05-04\noperator: o\nparts:\n  C4:\n    kind: capacitor\n    dcr: 2 ohm\n---\n";
    expect_at(src, "applies only to an inductor", 9, 5);
}

#[test]
fn mutated_notebooks_do_not_panic() {
    // Deterministic mutations (a fixed linear congruential sequence) of a valid notebook.
    let base: Vec<char> = GOOD.chars().collect();
    let subs = [
        '|', '#', '-', ':', '\t', '\n', '`', '[', '{', '"', 'µ', '/', '(', ' ', '0', 'e',
    ];
    let mut x: u64 = 0x2545_f491_4f6c_dd1d;
    for _ in 0..3000 {
        x = x
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        let pos = (x >> 33) as usize % base.len();
        let sub = subs[(x >> 20) as usize % subs.len()];
        let mut v = base.clone();
        if x & 1 == 0 {
            v[pos] = sub;
        } else {
            v.remove(pos);
        }
        let s: String = v.into_iter().collect();
        if let Err(ds) = notebook::parse(&s) {
            let parsed = s.strip_prefix('\u{FEFF}').unwrap_or(&s);
            for d in &ds {
                assert!(
                    d.span.start <= d.span.end && d.span.end <= parsed.len(),
                    "{d:?}"
                );
            }
            let _ = diag::render("m.md", parsed, &ds);
        }
    }
}

#[test]
fn format_md_example_block() {
    // The readings block shown in FORMAT.md (its `...` row left out), with parts and meter defined.
    let src = "---\nrecord: r\ntitle: t\ndate: 2026-05-04\noperator: o\ninstruments:\n  dmm: {what: meter}\nparts:\n  R1: {kind: resistor}\n  L1: {kind: inductor}\n  C1: {kind: capacitor}\n---\n\n```readings\nid: tank-sweep\nnetwork: RLC\nparts: [R1, L1, C1]\nmeter: dmm\n---\nf/Hz    Vs/V   VR/V\n500     2.00   0.408\n```\n";
    let n = notebook::parse(src).unwrap_or_else(|d| panic!("{}", diag::render("t.md", src, &d)));
    let Some(Item::Readings(b)) = n.items.first() else {
        panic!("no block")
    };
    assert_eq!((b.id.as_str(), b.network), ("tank-sweep", Network::RLC));
    assert_eq!(b.rows.len(), 1);
    assert!((b.rows[0].cells[2].value - 0.408).abs() < 1e-15);
    assert_eq!(b.meter.as_ref().map(|m| m.name.as_str()), Some("dmm"));
}

// A front matter that cannot be read gives its own error only: the blocks' part and instrument
// names are not then reported as undefined (one slip, one message).
#[test]
fn front_matter_failure_brings_no_follow_on_errors() {
    let broken = FRONT.replace("title: Synthetic checks", "title: [Synthetic checks");
    let src = format!("{broken}\n```readings\n{RC_OK}```\n");
    let ds = errors(&src);
    let text = diag::render("t.md", &src, &ds);
    assert_eq!(ds.len(), 1, "one diagnostic expected, got:\n{text}");
    assert!(ds[0].message.contains("never closed"), "{text}");
    assert_eq!(line_col(&src, ds[0].span.start), (3, 8), "{text}");
}

// The same slip in a block header points at the `[` that is never closed.
#[test]
fn unclosed_flow_in_block_header_points_at_the_bracket() {
    let src = nb("id: b1\nnetwork: RC\nparts: [R1, C1\nmeter: dmm\n---\nf/Hz VR/V VC/V\n100 1 1\n");
    let d = expect_at(&src, "never closed", 17, 8);
    assert_eq!(
        d.expected.as_deref(),
        Some("`]` before the end of the line")
    );
}

// Messages for the slips people make (issue "A record a reviewer can sign"): the help says
// what was probably meant, at the value.
#[test]
fn common_slips_get_a_suggestion_at_the_value() {
    let with = |parts: &str| {
        format!("---\nrecord: a\ntitle: t\ndate: 2026-05-04\noperator: o\nparts:\n{parts}---\n")
    };
    let helps = |d: &Diagnostic| d.help.clone().unwrap_or_default();
    // A prefixed unit in the wrong case.
    let d = expect_at(
        &with("  C1: {kind: capacitor, nominal: 68 nf}\n"),
        "unknown unit `nf`",
        7,
        37,
    );
    assert!(helps(&d).contains("did you mean `nF`?"), "{}", helps(&d));
    let d = expect_at(
        &with("  L1: {kind: inductor, nominal: 4.7 mh}\n"),
        "unknown unit",
        7,
        37,
    );
    assert!(helps(&d).contains("did you mean `mH`?"), "{}", helps(&d));
    // A bare number on a capacitor: a prefix, never 220 F.
    let d = expect_at(
        &with("  C1: {kind: capacitor, nominal: 220}\n"),
        "`nominal` needs a unit",
        7,
        34,
    );
    assert!(
        helps(&d).contains("`220 nF`") && !helps(&d).contains("`220 F`"),
        "{}",
        helps(&d)
    );
    // A tolerance without its percent sign.
    let d = expect_at(
        &with("  R1: {kind: resistor, nominal: 1 kohm, tolerance: 5}\n"),
        "tolerance does not fit a resistor",
        7,
        52,
    );
    assert!(helps(&d).contains("`5%`"), "{}", helps(&d));
}

// Numbers as people paste them (common practice: spreadsheets and locales write `1,000`,
// `1 000` and `0,47`); each gets one error that says what was probably meant.
#[test]
fn pasted_numbers_get_one_clear_error_each() {
    let table = |rows: &str| {
        nb(&format!(
            "{}{rows}",
            RC_OK.trim_end_matches("300   0.41  1.90\n")
        ))
    };
    // A thousands separator.
    let d = expect_at(&table("1,000 0.41 1.90\n"), "thousands separator", 21, 1);
    assert!(
        d.help.as_deref().unwrap_or("").contains("write `1000`"),
        "{d:?}"
    );
    // Digit grouping with a space, pointed at, not the row's last cell.
    let d = expect_at(
        &table("1 000 0.41 1.90\n"),
        "digits grouped by a space",
        21,
        1,
    );
    assert_eq!(d.help.as_deref(), Some("write `1000`"));
    // A pasted table with decimal commas: one error with the count.
    let src = table("300 0,41 1,90\n600 0,78 1,62\n");
    let ds = errors(&src);
    let commas: Vec<&Diagnostic> = ds
        .iter()
        .filter(|d| d.message.contains("decimal comma"))
        .collect();
    assert_eq!(commas.len(), 1, "{ds:?}");
    assert!(
        commas[0]
            .message
            .contains("(4 cells of this table, to line 22)"),
        "{}",
        commas[0].message
    );
    assert_eq!(line_col(&src, commas[0].span.start).0, 21);
}

// A YAML indentation slip names both lines and how to indent.
#[test]
fn a_yaml_indent_slip_says_how_to_indent() {
    let src = "---\nrecord: a\ntitle: t\ndate: 2026-05-04\noperator: o\nparts:\n  C1:\n   kind: capacitor\n    nominal: 68 nF\n---\n";
    let d = errors(src)
        .into_iter()
        .find(|d| d.message.contains("not valid YAML"))
        .expect("a YAML error");
    let h = d.help.unwrap_or_default();
    assert!(
        h.contains("`kind` (line 8) is indented 3 spaces and `nominal` (line 9) 4"),
        "{h}"
    );
}

//! Readings off a display (voltages in divisions, peak-to-peak columns) and the frequency's
//! own uncertainty from the generator's stated accuracy.
//!
//! Outside references: GUM (JCGM 100:2008) 4.3.7 (a rectangular half-width a gives u = a/√3)
//! and 5.1.2 (law of propagation for uncorrelated inputs); the RMS of a sine (any electronics
//! handbook, common practice: V_rms = V_p/√2 = V_pp/(2√2)), checked here also by summing sin²
//! over one period. Synthetic readings are made by complex arithmetic from invented part values
//! (4.7 kΩ, 33 nF, 2.5 V source); the reduction must give those values back.

use benchrec::networks::inputs::{BlockInputs, Spec};
use benchrec::networks::{reduce, BlockResult, Context};
use benchrec::notebook::{self, Item, ReadingsBlock, SINE_PP_PER_RMS};
use num_complex::Complex64;
use std::f64::consts::PI;

mod common;

const R: f64 = 4.7e3;
const C: f64 = 33e-9;
const VS: f64 = 2.5;
const FREQS: [f64; 4] = [250.0, 500.0, 1000.0, 2000.0];

/// |V_R| and |V_C| of the series pair at `f` (phasors, num-complex).
fn readings(f: f64) -> (f64, f64) {
    let w = 2.0 * PI * f;
    let zc = Complex64::new(0.0, -1.0 / (w * C));
    let i = Complex64::new(VS, 0.0) / (Complex64::new(R, 0.0) + zc);
    ((i * R).norm(), (i * zc).norm())
}

/// A notebook with an invented RC block: `head` the extra header lines, `headings` the table's
/// heading, `cell` each row's (VR, VC) as written.
fn notebook(
    instruments: &str,
    head: &str,
    headings: &str,
    cell: &dyn Fn(f64, f64) -> String,
) -> String {
    let mut rows = String::new();
    for f in FREQS {
        let (vr, vc) = readings(f);
        rows.push_str(&format!("{f}  {}\n", cell(vr, vc)));
    }
    format!(
        "---\nrecord: DX-0001\ntitle: Readings off a display (invented)\ndate: 2026-10-05\n\
         operator: T. Tester (synthetic)\ninstruments:\n{instruments}parts:\n  R1:\n    kind: resistor\n\
         \x20   nominal: 4.7 kohm\n    tolerance: 1%\n  C1:\n    kind: capacitor\n    nominal: 33 nF\n\
         \x20   tolerance: 5%\n---\n\nInvented readings, made by complex arithmetic.\n\n\
         ```readings\nid: blk\nnetwork: RC\nparts: [R1, C1]\n{head}---\nf/Hz  {headings}\n{rows}```\n"
    )
}

const INSTRUMENTS: &str =
    "  dmm:\n    accuracy: 0.5%\n  scope:\n    reading: 0.1 div\n    vertical: 3%\n";

fn block_result(text: &str) -> BlockResult {
    let nb = notebook::parse(text).unwrap_or_else(|d| panic!("{d:?}"));
    reduce(&nb)
        .unwrap_or_else(|d| panic!("{d:?}"))
        .blocks
        .into_iter()
        .next()
        .expect("one block")
}

/// (value, u) of the block result C.
fn block_c(b: &BlockResult) -> (f64, f64) {
    let c = b.results.iter().find(|r| r.name == "C").expect("C");
    (c.m.value, c.m.u)
}

fn rel(a: f64, b: f64) -> f64 {
    ((a - b) / b).abs()
}

// Exact readings in divisions (div = V / scale) reduce to the C the same readings in volts give,
// and to the chosen 33 nF; peak-to-peak readings (2√2 × RMS for a sine) likewise.
#[test]
fn divisions_and_peak_to_peak_reduce_as_volts() {
    let volts = notebook(INSTRUMENTS, "meter: dmm\n", "VR/V  VC/V", &|vr, vc| {
        format!("{vr:e}  {vc:e}")
    });
    let (sr, sc) = (0.5, 0.2);
    let divs = notebook(
        INSTRUMENTS,
        "phase: scope\nscale: {VR: 0.5 V/div, VC: 200 mV/div}\n",
        "VR/div  VC/div",
        &|vr, vc| format!("{:e}  {:e}", vr / sr, vc / sc),
    );
    let pp = notebook(
        INSTRUMENTS,
        "meter: dmm\nphase: scope\nscale: {VRpp: 1 V/div}\n",
        "VRpp/div  VCpp/V",
        &|vr, vc| {
            format!(
                "{:e}  {:e}",
                vr * SINE_PP_PER_RMS / 1.0,
                vc * SINE_PP_PER_RMS
            )
        },
    );
    let (cv, _) = block_c(&block_result(&volts));
    let (cd, ud) = block_c(&block_result(&divs));
    let (cp, _) = block_c(&block_result(&pp));
    assert!(rel(cd, cv) < 1e-12, "C in div {cd} against C in V {cv}");
    assert!(
        rel(cp, cv) < 1e-12,
        "C peak to peak {cp} against C in V {cv}"
    );
    assert!(rel(cv, C) < 1e-12, "C {cv} against the chosen {C}");
    assert!(ud > 0.0 && ud.is_finite());
}

fn first_block(nb: &notebook::Notebook) -> &ReadingsBlock {
    nb.items
        .iter()
        .find_map(|i| match i {
            Item::Readings(b) => Some(b),
            _ => None,
        })
        .expect("a block")
}

/// A one-row block with a model result `Y = VR`: the inputs of its VR reading, and the
/// propagated u of Y.
fn one_reading(heading: &str, cell: &str, scale: &str) -> (BlockInputs, f64, f64) {
    let text = format!(
        "---\nrecord: DX-0002\ntitle: One reading off a display (invented)\ndate: 2026-10-05\n\
         operator: T. Tester (synthetic)\ninstruments:\n  scope:\n    reading: 0.1 div\n    vertical: 3%\n---\n\n\
         ```readings\nid: one\nnetwork: model\ndisplay: scope\nscale: {{{scale}}}\n\
         model:\n  Y: {{ expr: \"VR\", unit: V }}\n---\n{heading}\n{cell}\n```\n"
    );
    let nb = notebook::parse(&text).unwrap_or_else(|d| panic!("{d:?}"));
    let spec = Spec {
        network: "model",
        required: &["VR"],
        optional: &[],
        resistor: false,
    };
    let bi = BlockInputs::build(&Context::new(&nb), first_block(&nb), &spec)
        .unwrap_or_else(|d| panic!("{d:?}"));
    let red = reduce(&nb).unwrap_or_else(|d| panic!("{d:?}"));
    let y = red.blocks[0]
        .results
        .iter()
        .chain(red.blocks[0].rows.iter())
        .find(|r| r.name == "Y")
        .expect("Y")
        .m
        .clone();
    (bi, y.value, y.u)
}

/// The standard uncertainty of the reading from its inputs: v = mean · gain + read, so
/// ∂v/∂gain = mean and ∂v/∂read = 1 (GUM 5.1.2, uncorrelated inputs).
fn reading_u(bi: &BlockInputs) -> f64 {
    let u_of = |prefix: &str| {
        let i: Vec<_> = bi
            .inputs
            .iter()
            .filter(|i| i.name.starts_with(prefix))
            .collect();
        assert_eq!(i.len(), 1, "one input {prefix}…: {:?}", bi.inputs);
        i[0].u
    };
    let v = bi.value("VR", 0, &bi.estimates());
    ((v * u_of("gain(scope,")).powi(2) + u_of("read(scope,").powi(2)).sqrt()
}

// One VR/div reading: u² = (scale · a/√3)² + (V · g/√3)², a = 0.1 div the reading half-width
// and g = 3 % the vertical gain accuracy, both rectangular (GUM 4.3.7).
#[test]
fn one_division_reading_against_hand_propagation() {
    let (scale, div, a, g) = (0.5, 3.4, 0.1, 0.03);
    let v = div * scale;
    let hand = ((scale * a / 3f64.sqrt()).powi(2) + (v * g / 3f64.sqrt()).powi(2)).sqrt();
    let (bi, y, uy) = one_reading("VR/div", "3.4", "VR: 0.5 V/div");
    assert!(rel(y, v) < 1e-15, "value {y} against {v}");
    assert!(
        rel(reading_u(&bi), hand) < 1e-12,
        "inputs give {} against {hand}",
        reading_u(&bi)
    );
    // Through the reduction's numerical derivatives (REL_STEP = 1e-6: round-off ~1e-9 here).
    assert!(rel(uy, hand) < 1e-8, "propagated {uy} against {hand}");

    // Peak to peak: the same reading as VRpp is the RMS of a sine, both terms over 2√2.
    let (bi, y, uy) = one_reading("VRpp/div", "3.4", "VRpp: 0.5 V/div");
    let k = 2.0 * 2f64.sqrt();
    assert!(rel(y, v / k) < 1e-15, "value {y} against {}", v / k);
    assert!(rel(reading_u(&bi), hand / k) < 1e-12);
    assert!(rel(uy, hand / k) < 1e-8);
}

// V_pp = 2 V_p and V_rms = V_p / √2 for a sine (any electronics handbook; common practice), so
// V_pp / V_rms = 2√2; checked against the RMS of one sampled period (Σ sin² / N = 1/2 exactly for
// N ≥ 3 equally spaced samples).
#[test]
fn peak_to_peak_factor_is_that_of_a_sine() {
    assert!(rel(SINE_PP_PER_RMS, 2.0 * 2f64.sqrt()) < 1e-15);
    let n = 1000;
    let ms: f64 = (0..n)
        .map(|i| (2.0 * PI * i as f64 / n as f64).sin().powi(2))
        .sum::<f64>()
        / n as f64;
    let vpp = 2.0; // a sine of unit peak
    assert!(rel(vpp / ms.sqrt(), SINE_PP_PER_RMS) < 1e-12);
}

fn one_row_rc(generator: &str, head: &str) -> BlockResult {
    let (vr, vc) = readings(1000.0);
    let text = format!(
        "---\nrecord: DX-0003\ntitle: The frequency's own uncertainty (invented)\ndate: 2026-10-05\n\
         operator: T. Tester (synthetic)\ninstruments:\n  dmm:\n    accuracy: 0.5%\n  gen:\n    accuracy: {generator}\n\
         parts:\n  R1:\n    kind: resistor\n    nominal: 4.7 kohm\n    tolerance: 1%\n  C1:\n    kind: capacitor\n\
         \x20   nominal: 33 nF\n    tolerance: 5%\n---\n\n```readings\nid: gen\nnetwork: RC\nparts: [R1, C1]\n\
         meter: dmm\n{head}---\nf/Hz  VR/V  VC/V\n1000  {vr:e}  {vc:e}\n```\n"
    );
    block_result(&text)
}

// A generator stated to 50 ppm gives f one gain input, u(f) = f · 50e-6/√3 (GUM 4.3.7), and adds
// its term to u(C): C = V_R / (2π f R V_C), so u_r²(C) = u_r²(V_R) + u_r²(V_C) + u_r²(f) + u_r²(R)
// with u_r = 0.5 %/√3 for each meter gain, 1 %/√3 for R and 50 ppm/√3 for f (GUM 5.1.2, 5.1.6).
#[test]
fn generator_accuracy_is_the_frequency_input() {
    let with = one_row_rc("50 ppm", "generator: gen\n");
    let without = one_row_rc("50 ppm", "");
    let (c, u) = block_c(&with);
    let (c0, u0) = block_c(&without);
    assert!(rel(c, C) < 1e-12 && rel(c0, C) < 1e-12);
    let r3 = 3f64.sqrt();
    let (g, t, fa) = (0.005 / r3, 0.01 / r3, 50e-6 / r3);
    let hand = c * (2.0 * g * g + t * t + fa * fa).sqrt();
    let hand0 = c * (2.0 * g * g + t * t).sqrt();
    assert!(rel(u, hand) < 1e-8, "u(C) {u} against {hand}");
    assert!(rel(u0, hand0) < 1e-8, "u(C) {u0} against {hand0}");
    // The f line of the budget: u(f) = f · 50e-6/√3 as a relative gain, contribution C · u_r(f).
    let cm = &with.results.iter().find(|r| r.name == "C").unwrap().m;
    let line = cm
        .budget
        .iter()
        .find(|l| l.input == "gain(gen,f)")
        .expect("f gain");
    assert!(
        rel(line.u * 1000.0, 1000.0 * 50e-6 / r3) < 1e-12,
        "u(f) {}",
        line.u * 1000.0
    );
    assert!(rel(line.contribution, c * fa) < 1e-8);
    // Without a counter or generator the frequency is exact, said in a note.
    assert!(without
        .flags
        .iter()
        .any(|f| !f.warn && f.message.contains("the frequency is taken as exact")));
    assert!(!with.flags.iter().any(|f| f.message.contains("column f")));
    // `0.005%` is the same accuracy as `50 ppm`.
    let pct = one_row_rc("0.005%", "generator: gen\n");
    assert!(rel(block_c(&pct).1, u) < 1e-12);
}

// Two blocks without a counter or generator: the record says once that f was taken as exact.
#[test]
fn exact_frequency_is_one_note_for_the_record() {
    let one = notebook(INSTRUMENTS, "meter: dmm\n", "VR/V  VC/V", &|vr, vc| {
        format!("{vr:.5}  {vc:.5}")
    });
    let block = &one[one.find("```readings").unwrap()..];
    let text = format!("{one}\n{}", block.replace("id: blk\n", "id: blk2\n"));
    assert_eq!(text.matches("```readings").count(), 2);
    let dir = tempfile::tempdir().unwrap();
    let nb = dir.path().join("two.md");
    std::fs::write(&nb, &text).unwrap();
    let o = common::run(&["build", common::s(&nb)]);
    assert!(o.status.success(), "{}", common::stderr(&o));
    let pdf = common::squash(&common::pdf_text_file(&nb.with_extension("pdf")));
    assert_eq!(pdf.matches("takenasexact").count(), 1, "{pdf}");
}

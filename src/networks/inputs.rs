//! Readings and instrument specifications → model inputs (GUM 4.2, 4.3, 5.2), shared by
//! every network.
//!
//! Rules:
//! - Rows with the same `f` (every row when there is no `f` column) are repeat observations:
//!   one input per (column, group) holding the mean, Type A u = s/√n, ν = n − 1, Student's t.
//!   Means of two columns from the same rows get the correlation coefficient of GUM 5.2.3
//!   (eq. 17). A single reading (n = 1) has no Type A: its input has u = 0.
//! - Instruments: `meter` for Vs, VR, VC, VL, V, I; `phase` for shift, period and phi;
//!   `counter` for f, else the `generator`'s stated frequency accuracy. A column without an
//!   instrument gets no Type B and a note (for f: the frequency is taken as exact).
//! - A voltage read in divisions (`VR/div`) is read on the `display`, else the `phase`
//!   instrument: its `reading` half-width (div) × the column's scale is a per-reading
//!   rectangular offset, its `vertical` accuracy one gain input for the column and scale; the
//!   display's other keys do not apply. A peak-to-peak column (`VRpp/…`) holds RMS for a sine,
//!   so its per-reading offsets are divided by 2√2 as well.
//! - Accuracy `P% + N counts` splits into a gain (one input per instrument and column, value 1,
//!   u from P %, shared by every row of that column: averaging does not shrink it, GUM 5.2 and
//!   F.1.2) and a per-reading offset (value 0): N × resolution, or, with no counts, the
//!   quantisation half-width resolution/2 (rectangular). An absolute accuracy is a per-reading
//!   offset. The scale `reading` half-width is a further per-reading rectangular offset.
//! - Ranges (FORMAT.md 1.1): with `ranges` on the instrument, each group's readings of a column
//!   are on the range its heading names, else on the smallest listed range that holds them
//!   all; one gain per (instrument, range), shared by every column and group of the block on
//!   that range, with that range's accuracy. Counts stay N × resolution.
//!   The value used in a model is x = mean · gain + Σ offsets. A group's offsets carry the u of
//!   one reading (not divided by √n): counts and scale reading repeat from reading to reading.
//! - Resolutions and absolute accuracies apply only to columns of their own unit.
//! - Frequency: the `f` column value with the counter's gain and offset; without a counter it
//!   is taken as exact (and flagged like any column without an instrument).
//! - Series resistor: the first resistor in `parts`: its `measured` value with the accuracy of
//!   its `by` instrument, else its nominal with the tolerance as a rectangular half-width.
//! - Flags: readings above an instrument's bandwidth, readings dated after its `due` date, and
//!   rows whose Vs departs from the stated `source` level by more than the meter's accuracy
//!   limit; every voltage of such a row's group is then scaled by source/Vs
//!   ([`BlockInputs::voltage`]), with the uncertainty of Vs propagated.

use super::{Context, Flag};
use crate::diag::{Diagnostic, Span};
use crate::montecarlo::{Col, Columns, CHUNK};
use crate::notebook::{
    Accuracy, Column, Distribution, Instrument, Named, PartKind, ReadingsBlock, Tolerance,
};
use crate::print::{hz, plain};
use crate::quantity::{dimension_name, Unit};
use crate::uncertainty::{dist_of, type_a, type_a_correlation, type_b, Dist, Input, Model};
use std::collections::BTreeMap;

/// Rows holding repeat observations at one frequency.
#[derive(Debug, Clone, PartialEq)]
pub struct Group {
    /// The `f` column value (Hz), None without an `f` column.
    pub f: Option<f64>,
    /// Row indices into `block.rows`, in notebook order.
    pub rows: Vec<usize>,
    /// Span of the group's first row.
    pub span: Span,
}

/// Groups the rows by exact `f` value, in order of first appearance; one group of every row
/// when there is no `f` column. A non-finite or non-positive f is a diagnostic.
pub fn groups(block: &ReadingsBlock) -> Result<Vec<Group>, Vec<Diagnostic>> {
    let Some(fc) = block.col("f") else {
        return Ok(vec![Group {
            f: None,
            rows: (0..block.rows.len()).collect(),
            span: block.rows.first().map(|r| r.span).unwrap_or(block.span),
        }]);
    };
    let mut out: Vec<Group> = Vec::new();
    let mut diags = Vec::new();
    for (i, row) in block.rows.iter().enumerate() {
        let Some(cell) = row.cells.get(fc) else {
            diags.push(Diagnostic::new(row.span, "row has no value in column f"));
            continue;
        };
        let f = cell.value;
        if !(f.is_finite() && f > 0.0) {
            diags.push(
                Diagnostic::new(cell.span, "frequency must be positive")
                    .expected("a frequency above 0 Hz")
                    .found(cell.text.clone()),
            );
            continue;
        }
        match out.iter_mut().find(|g| g.f == Some(f)) {
            Some(g) => g.rows.push(i),
            None => out.push(Group {
                f: Some(f),
                rows: vec![i],
                span: row.span,
            }),
        }
    }
    if diags.is_empty() {
        Ok(out)
    } else {
        Err(diags)
    }
}

/// A quantity value in a model: `base` (or the input `mean`) · gain + Σ offsets.
#[derive(Debug, Clone, PartialEq)]
pub struct Value {
    /// Used when `mean` is None (an exact frequency, say).
    pub base: f64,
    pub mean: Option<usize>,
    pub gain: Option<usize>,
    pub offsets: Vec<usize>,
}

impl Value {
    pub fn exact(v: f64) -> Value {
        Value {
            base: v,
            mean: None,
            gain: None,
            offsets: Vec::new(),
        }
    }

    /// Evaluates at input values `x` (NaN if an index is missing, which `propagate` rejects).
    pub fn eval(&self, x: &[f64]) -> f64 {
        let at = |i: usize| x.get(i).copied().unwrap_or(f64::NAN);
        let mut v = match self.mean {
            Some(i) => at(i),
            None => self.base,
        };
        if let Some(g) = self.gain {
            v *= at(g);
        }
        for &o in &self.offsets {
            v += at(o);
        }
        v
    }

    /// [`Value::eval`] over a chunk of Monte Carlo trials, into `out[..c.len]`: the same
    /// operations in the same order, so the same values.
    pub fn eval_cols(&self, c: &Columns, out: &mut [f64]) {
        crate::montecarlo::wide(|| self.eval_cols_here(c, out))
    }

    #[inline(always)]
    fn eval_cols_here(&self, c: &Columns, out: &mut [f64]) {
        let out = &mut out[..c.len];
        match self.mean.map(|i| c.col(i)) {
            Some(Col::Drawn(v)) => out.copy_from_slice(v),
            Some(Col::Fixed(v)) => out.fill(v),
            None => out.fill(self.base),
        }
        let terms = self.gain.iter().map(|&g| (g, true));
        for (i, gain) in terms.chain(self.offsets.iter().map(|&o| (o, false))) {
            match (c.col(i), gain) {
                (Col::Drawn(v), true) => out.iter_mut().zip(v).for_each(|(o, g)| *o *= g),
                (Col::Drawn(v), false) => out.iter_mut().zip(v).for_each(|(o, a)| *o += a),
                (Col::Fixed(g), true) => out.iter_mut().for_each(|o| *o *= g),
                (Col::Fixed(a), false) => out.iter_mut().for_each(|o| *o += a),
            }
        }
    }
}

/// What a network reads from a block.
#[derive(Debug, Clone, Copy)]
pub struct Spec<'s> {
    /// Network name for messages.
    pub network: &'s str,
    /// Columns that must be present.
    pub required: &'s [&'s str],
    /// Columns used when present (besides the required ones).
    pub optional: &'s [&'s str],
    /// Whether a series resistor from `parts` is needed.
    pub resistor: bool,
}

/// The inputs of one block, with handles to build its model.
#[derive(Debug, Clone)]
pub struct BlockInputs {
    pub inputs: Vec<Input>,
    pub corr: Vec<(usize, usize, f64)>,
    pub flags: Vec<Flag>,
    pub groups: Vec<Group>,
    /// Value per (column symbol, group).
    values: BTreeMap<String, Vec<Value>>,
    /// Frequency per group (None without an `f` column).
    freq: Vec<Option<Value>>,
    /// Series resistor: input index and part name.
    pub resistor: Option<(usize, String)>,
    /// Stated source level and, per group, whether its voltages are normalised to it.
    source: Option<f64>,
    normalise: Vec<bool>,
    /// Gain input per (instrument, range index), shared by every column read on that range.
    range_gains: BTreeMap<(String, usize), usize>,
}

/// Instrument assigned to a column by the block header: for `f` the counter, else the
/// generator (its stated frequency accuracy).
pub fn instrument_slot<'b>(block: &'b ReadingsBlock, symbol: &str) -> Option<&'b Named> {
    match symbol {
        "f" => block.counter.as_ref().or(block.readout.generator.as_ref()),
        "shift" | "period" | "phi" => block.phase.as_ref(),
        _ => block.meter.as_ref(),
    }
}

/// [`instrument_slot`] for a column as read: a voltage read in divisions (`VR/div`) is read
/// on the block's `display`, else on its `phase` instrument (the two-trace display).
pub fn column_slot<'b>(block: &'b ReadingsBlock, c: &Column) -> Option<&'b Named> {
    if c.readout.divisions {
        block.readout.display.as_ref().or(block.phase.as_ref())
    } else {
        instrument_slot(block, &c.symbol)
    }
}

const VOLTAGES: [&str; 6] = ["Vs", "VR", "VC", "VL", "V", "VT"];

fn unit_ok(q: &crate::quantity::Quantity, unit: Unit) -> bool {
    q.unit == unit
}

/// The smallest of `inst`'s ranges in `unit` that holds `x` (index into `inst.ranges`).
pub fn range_for(inst: &Instrument, unit: Unit, x: f64) -> Option<usize> {
    inst.ranges
        .iter()
        .enumerate()
        .filter(|(_, r)| r.full_scale.unit == unit && x.abs() <= r.full_scale.value)
        .min_by(|a, b| a.1.full_scale.value.total_cmp(&b.1.full_scale.value))
        .map(|(i, _)| i)
}

/// The accuracy that applies on range `range` (the instrument's one accuracy without a
/// per-range map).
pub fn accuracy_at(inst: &Instrument, range: Option<usize>) -> Option<&Accuracy> {
    if inst.range_accuracy.is_empty() {
        return inst.accuracy.as_ref();
    }
    let r = range?;
    inst.range_accuracy
        .iter()
        .find(|(i, _)| *i == r)
        .map(|(_, a)| a)
}

/// A full-scale value as budget names write it: `200 mV`, `2 V`.
pub fn range_name(q: &crate::quantity::Quantity) -> String {
    let s = crate::print::quantity_sig(q.value, q.unit, 6);
    match s.split_once(' ') {
        Some((num, unit)) if num.contains('.') => {
            format!("{} {unit}", num.trim_end_matches('0').trim_end_matches('.'))
        }
        _ => s,
    }
}

/// Half-width of an instrument's accuracy limit for a reading `x` in `unit` (used for the
/// source-level check): P·|x| + N·resolution, an absolute limit, or resolution/2; with
/// `ranges`, the accuracy of the range that holds `x`.
pub fn accuracy_limit(inst: &Instrument, x: f64, unit: Unit) -> f64 {
    let res = inst
        .resolution
        .filter(|r| unit_ok(r, unit))
        .map(|r| r.value.abs());
    match accuracy_at(inst, range_for(inst, unit, x)) {
        Some(Accuracy::Relative { fraction, counts }) => {
            let c = if *counts > 0.0 {
                counts * res.unwrap_or(0.0)
            } else {
                res.unwrap_or(0.0) / 2.0
            };
            fraction.abs() * x.abs() + c
        }
        Some(Accuracy::Absolute(q)) if unit_ok(q, unit) => q.value.abs(),
        _ => res.unwrap_or(0.0) / 2.0,
    }
}

/// The Type B terms of one column read with its instrument.
struct TypeBTerms<'i> {
    /// Gain input shared by every row of the column.
    gain: Option<usize>,
    /// Per-reading counts, resolution or absolute-accuracy offset: (u, distribution, label).
    count: Option<(f64, Dist, &'i str)>,
    /// Per-reading scale-reading offset u (rectangular).
    read: Option<f64>,
}

/// Block checks before any input is made: required columns, rows, groups, every used cell
/// present and finite, the header's instruments defined. Returns the groups and the
/// instruments (each once).
fn check_block<'c>(
    ctx: &Context<'c>,
    block: &'c ReadingsBlock,
    spec: &Spec,
    used: &[&str],
) -> Result<(Vec<Group>, Vec<(&'c Named, &'c Instrument)>), Vec<Diagnostic>> {
    let mut diags = Vec::new();
    let missing: Vec<&str> = spec
        .required
        .iter()
        .copied()
        .filter(|s| block.col(s).is_none())
        .collect();
    if !missing.is_empty() {
        diags.push(
            Diagnostic::new(
                block.span,
                format!(
                    "network {} needs columns {}",
                    spec.network,
                    spec.required.join(", ")
                ),
            )
            .expected(spec.required.join(", "))
            .found(format!("no column {}", missing.join(", "))),
        );
    }
    if block.rows.is_empty() {
        diags.push(Diagnostic::new(block.span, "readings block has no rows"));
    }
    let groups = match groups(block) {
        Ok(g) => g,
        Err(d) => {
            diags.extend(d);
            Vec::new()
        }
    };
    // Every used cell must exist and be finite.
    for row in &block.rows {
        for s in used {
            if let Some(ci) = block.col(s) {
                match row.cells.get(ci) {
                    None => diags.push(Diagnostic::new(
                        row.span,
                        format!("row has no value in column {s}"),
                    )),
                    Some(c) if !c.value.is_finite() => diags.push(
                        Diagnostic::new(
                            c.span,
                            format!("value in column {s} is not a finite number"),
                        )
                        .found(c.text.clone()),
                    ),
                    _ => {}
                }
            }
        }
    }
    // Instruments named in the header must exist.
    let mut insts: Vec<(&Named, &Instrument)> = Vec::new();
    // The generator serves only when no counter is named.
    let generator = block
        .readout
        .generator
        .as_ref()
        .filter(|_| block.counter.is_none());
    for n in [
        &block.meter,
        &block.phase,
        &block.counter,
        &block.readout.display,
    ]
    .into_iter()
    .flatten()
    .chain(generator)
    {
        match ctx.instruments.get(&n.name) {
            Some(i) => {
                if !insts.iter().any(|(m, _)| m.name == n.name) {
                    insts.push((n, i));
                }
            }
            None => diags.push(
                Diagnostic::new(n.span, format!("unknown instrument {}", n.name))
                    .expected("a name under `instruments` in the front matter")
                    .found(n.name.clone()),
            ),
        }
    }
    if diags.is_empty() {
        Ok((groups, insts))
    } else {
        Err(diags)
    }
}

/// The range of each group's readings per used column whose instrument lists `ranges`
/// (FORMAT.md 1.1): the range the heading names, else the smallest listed range that holds
/// every reading of the group. A heading range the instrument does not list, an instrument
/// with no range in the column's unit, and a reading over its range are errors at the
/// notebook.
fn column_ranges(
    ctx: &Context,
    block: &ReadingsBlock,
    groups: &[Group],
    used: &[&str],
) -> Result<BTreeMap<String, Vec<Option<usize>>>, Vec<Diagnostic>> {
    let mut out = BTreeMap::new();
    let mut diags = Vec::new();
    for (ci, c) in block.columns.iter().enumerate() {
        // A display's divisions have no ranges.
        if !(c.symbol == "f" || used.contains(&c.symbol.as_str())) || c.readout.divisions {
            continue;
        }
        // A peak-to-peak reading is on the range that holds it, not its RMS value.
        let k = c.readout.factor();
        let slot = column_slot(block, c);
        let inst = slot.and_then(|n| ctx.instruments.get(&n.name));
        let iname = slot.map_or("no instrument", |n| n.name.as_str());
        let listed: Vec<String> = inst
            .map(|i| i.ranges.iter().filter(|r| r.full_scale.unit == c.unit))
            .into_iter()
            .flatten()
            .map(|r| range_name(&r.full_scale))
            .collect();
        let forced = match (&c.range, inst) {
            (None, _) => None,
            (Some(r), i) => match i.and_then(|i| {
                i.ranges
                    .iter()
                    .position(|x| crate::notebook::same_range(&x.full_scale, &r.full_scale))
            }) {
                Some(p) => Some(p),
                None => {
                    let name = range_name(&r.full_scale);
                    diags.push(
                        Diagnostic::new(
                            r.span,
                            format!("the heading names a {name} range that {iname} does not list"),
                        )
                        .expected(if listed.is_empty() {
                            format!("a `ranges` list on {iname} that holds {name}")
                        } else {
                            format!("one of the ranges of {iname}: {}", listed.join(", "))
                        })
                        .found(format!(
                            "`@{}`",
                            // A heading in a table file stands past the notebook's end.
                            ctx.source.get(r.span.start..r.span.end).map_or_else(
                                || crate::print::quantity(r.full_scale.value, r.full_scale.unit),
                                str::to_string
                            )
                        )),
                    );
                    continue;
                }
            },
        };
        let Some(i) = inst.filter(|i| !i.ranges.is_empty()) else {
            continue;
        };
        if listed.is_empty() {
            diags.push(
                Diagnostic::new(
                    c.span,
                    format!(
                        "{iname} lists `ranges`, but none in {} for column {}",
                        dimension_name(c.unit),
                        c.symbol
                    ),
                )
                .expected(format!(
                    "the ranges used for {} in the `ranges` of {iname}",
                    c.symbol
                ))
                .found(format!(
                    "ranges {}",
                    i.ranges
                        .iter()
                        .map(|r| range_name(&r.full_scale))
                        .collect::<Vec<_>>()
                        .join(", ")
                )),
            );
            continue;
        }
        let mut per_group = Vec::with_capacity(groups.len());
        for g in groups {
            let cells = g
                .rows
                .iter()
                .filter_map(|&r| block.rows.get(r)?.cells.get(ci));
            let Some(top) = cells.max_by(|a, b| a.value.abs().total_cmp(&b.value.abs())) else {
                per_group.push(None);
                continue;
            };
            let reading = top.value.abs() / k;
            let over = |fs: &crate::quantity::Quantity| reading > fs.value;
            let chosen = match forced {
                Some(p) => {
                    Some(p).filter(|&p| !i.ranges.get(p).is_some_and(|r| over(&r.full_scale)))
                }
                None => range_for(i, c.unit, reading),
            };
            if chosen.is_none() {
                let fs = match forced.and_then(|p| i.ranges.get(p)) {
                    Some(r) => r.full_scale.value,
                    None => i
                        .ranges
                        .iter()
                        .filter(|r| r.full_scale.unit == c.unit)
                        .map(|r| r.full_scale.value)
                        .fold(0.0, f64::max),
                };
                let fs_name = range_name(&crate::quantity::Quantity {
                    value: fs,
                    unit: c.unit,
                });
                let limit = if forced.is_some() {
                    format!("the {fs_name} range its heading names")
                } else {
                    format!("{fs_name}, the largest range of {iname}")
                };
                diags.push(
                    Diagnostic::new(top.span, format!("reading `{}` in column {} is over range: above {limit}", top.text, c.symbol))
                        .expected(format!("a reading of at most {fs_name}"))
                        .found(format!("`{}`", top.text))
                        .help(format!("add the range it was read on to the `ranges` of {iname}, or name it in the heading (`{}/{}@…`)", c.symbol, c.unit.symbol())),
                );
            }
            per_group.push(chosen);
        }
        out.insert(c.symbol.clone(), per_group);
    }
    if diags.is_empty() {
        Ok(out)
    } else {
        Err(diags)
    }
}

impl BlockInputs {
    /// Builds the inputs of a block for a network's `spec`.
    pub fn build(
        ctx: &Context,
        block: &ReadingsBlock,
        spec: &Spec,
    ) -> Result<BlockInputs, Vec<Diagnostic>> {
        let used: Vec<&str> = spec
            .required
            .iter()
            .chain(spec.optional.iter())
            .copied()
            .collect();
        let (groups, insts) = check_block(ctx, block, spec, &used)?;
        let mut bi = BlockInputs {
            inputs: Vec::new(),
            corr: Vec::new(),
            flags: Vec::new(),
            groups: groups.clone(),
            values: BTreeMap::new(),
            freq: vec![None; groups.len()],
            resistor: None,
            source: block.source,
            normalise: vec![false; groups.len()],
            range_gains: BTreeMap::new(),
        };
        let ranges = column_ranges(ctx, block, &groups, &used)?;
        for c in &block.columns {
            let s = c.symbol.as_str();
            if s != "f" && !used.contains(&s) {
                bi.flags.push(Flag {
                    warn: false,
                    span: Some(c.span),
                    message: format!("column {s} is not used by network {}", spec.network),
                });
            }
        }
        bi.due_flags(ctx, &insts);
        bi.bandwidth_flags(block, &insts, &used);

        // Measured columns.
        let mut col_inputs: BTreeMap<String, Vec<Option<usize>>> = BTreeMap::new();
        let mut diags = Vec::new();
        for c in &block.columns {
            let s = c.symbol.as_str();
            if !(s == "f" || used.contains(&s)) {
                continue;
            }
            let Some(ci) = block.col(s) else { continue };
            let inst = column_slot(block, c)
                .and_then(|n| ctx.instruments.get(&n.name).map(|i| (n.name.as_str(), i)));
            bi.readout_notes(c, inst.is_none());
            let col_ranges = ranges.get(s).map(Vec::as_slice).unwrap_or(&[]);
            let mut terms: Vec<(Option<usize>, TypeBTerms)> = Vec::new();
            if c.readout.divisions {
                match bi.display_terms(c, inst) {
                    Ok(t) => terms.push((None, t)),
                    Err(dg) => {
                        diags.push(dg);
                        continue;
                    }
                }
            }
            for r in col_ranges
                .iter()
                .copied()
                .chain((col_ranges.is_empty() && terms.is_empty()).then_some(None))
            {
                if !terms.iter().any(|(x, _)| *x == r) {
                    let t = bi.type_b_terms(c, inst, r);
                    terms.push((r, t));
                }
            }
            let idx_per_group = bi.column_values(block, c, ci, inst, (&terms, col_ranges));
            col_inputs.insert(s.to_string(), idx_per_group);
        }
        if !diags.is_empty() {
            return Err(diags);
        }
        bi.type_a_correlations(block, &used, &col_inputs);
        bi.source_level(ctx, block);

        // Series resistor.
        if spec.resistor {
            let (inp, name) = series_resistor(ctx, block, &mut bi.flags)?;
            bi.inputs.push(inp);
            bi.resistor = Some((bi.inputs.len() - 1, name));
        }
        Ok(bi)
    }

    /// Calibration due dates; with a lab register, entries overridden by the notebook and
    /// register entries with no calibration current on the readings' date.
    fn due_flags(&mut self, ctx: &Context, insts: &[(&Named, &Instrument)]) {
        for (n, i) in insts {
            if let Some(lab) = ctx.lab {
                if lab.overrides.contains(&n.name) {
                    self.flags.push(Flag {
                        warn: false,
                        span: Some(n.span),
                        message: format!("{} is this notebook's own instrument entry, which overrides the lab register's entry of that name", n.name),
                    });
                }
                if lab.asset(&n.name).is_some_and(|a| a.calibration.is_none()) {
                    self.flags.push(Flag {
                        warn: true,
                        span: Some(n.span),
                        message: format!("the lab register holds no calibration of {} made on or before the readings' date ({})", n.name, ctx.date),
                    });
                }
            }
            if let Some(due) = i.due {
                if ctx.date > due {
                    self.flags.push(Flag {
                        warn: true,
                        span: Some(n.span),
                        message: format!(
                            "readings dated {} were taken after the calibration of {} fell due ({})",
                            ctx.date, n.name, due
                        ),
                    });
                }
            }
        }
    }

    /// Readings above the bandwidth of an instrument that serves a used column.
    fn bandwidth_flags(
        &mut self,
        block: &ReadingsBlock,
        insts: &[(&Named, &Instrument)],
        used: &[&str],
    ) {
        let Some(fc) = block.col("f") else { return };
        for (n, i) in insts {
            let Some(bw) = i.bandwidth else { continue };
            let serves = block.columns.iter().any(|c| {
                (c.symbol == "f" || used.contains(&c.symbol.as_str()))
                    && column_slot(block, c)
                        .map(|m| m.name == n.name)
                        .unwrap_or(false)
            });
            if !serves {
                continue;
            }
            for row in &block.rows {
                if let Some(cell) = row.cells.get(fc) {
                    if cell.value > bw {
                        self.flags.push(Flag {
                            warn: true,
                            span: Some(row.span),
                            message: format!(
                                "reading at {} is above the bandwidth of {} ({})",
                                hz(cell.value),
                                n.name,
                                hz(bw)
                            ),
                        });
                    }
                }
            }
        }
    }

    /// The Type B terms of column `c` read with `inst` on range `range`: the gain input (pushed
    /// here; one per column without ranges, one per instrument range with them), and the
    /// per-reading offsets' standard uncertainties.
    fn type_b_terms<'i>(
        &mut self,
        c: &Column,
        inst: Option<(&'i str, &Instrument)>,
        range: Option<usize>,
    ) -> TypeBTerms<'i> {
        let mut t = TypeBTerms {
            gain: None,
            count: None,
            read: None,
        };
        let Some((iname, i)) = inst else { return t };
        let s = c.symbol.as_str();
        // Without counts, the quantisation half-width resolution/2 (rectangular).
        let quantisation = |r: f64| {
            let u = type_b(r / 2.0, Distribution::Rectangular);
            (u, Dist::Rectangular, "res")
        };
        let res = i
            .resolution
            .filter(|r| unit_ok(r, c.unit))
            .map(|r| r.value.abs());
        match accuracy_at(i, range) {
            Some(Accuracy::Relative { fraction, counts }) => {
                if *fraction != 0.0 {
                    t.gain = Some(self.gain_input(iname, i, s, (range, *fraction)));
                }
                if *counts > 0.0 {
                    match res {
                        Some(r) => t.count = Some((type_b(counts * r, i.distribution), dist_of(i.distribution), "counts")),
                        None => self.flags.push(Flag {
                            warn: false,
                            span: Some(i.span),
                            message: format!(
                                "accuracy of {iname} has {counts} counts but no resolution in {}: the counts are not included for column {s}",
                                c.unit.symbol()
                            ),
                        }),
                    }
                } else if let Some(r) = res {
                    t.count = Some(quantisation(r));
                }
            }
            Some(Accuracy::Absolute(q)) => {
                if unit_ok(q, c.unit) {
                    t.count = Some((
                        type_b(q.value, i.distribution),
                        dist_of(i.distribution),
                        "acc",
                    ));
                } else {
                    self.flags.push(Flag {
                        warn: false,
                        span: Some(i.span),
                        message: format!(
                            "accuracy of {iname} is in {}, not {}: not applied to column {s}",
                            q.unit.symbol(),
                            c.unit.symbol()
                        ),
                    });
                }
            }
            None => {
                if let Some(r) = res {
                    t.count = Some(quantisation(r));
                }
            }
        }
        if let Some(rd) = &i.reading {
            if unit_ok(rd, c.unit) {
                t.read = Some(type_b(rd.value, Distribution::Rectangular));
            } else if matches!(c.unit, Unit::Div) || matches!(rd.unit, Unit::Div) {
                self.flags.push(Flag {
                    warn: false,
                    span: Some(i.span),
                    message: format!(
                        "reading half-width of {iname} is in {}, not {}: not applied to column {s}",
                        rd.unit.symbol(),
                        c.unit.symbol()
                    ),
                });
            }
        }
        // A peak-to-peak reading's offsets are in the reading's volts: as RMS, × 1/(2√2).
        let k = c.readout.factor();
        if let Some(count) = t.count.as_mut() {
            count.0 *= k;
        }
        if let Some(read) = t.read.as_mut() {
            *read *= k;
        }
        t
    }

    /// Notes on how column `c` was read: with no instrument (the frequency taken as exact),
    /// and peak to peak (converted to RMS for a sine).
    fn readout_notes(&mut self, c: &Column, no_instrument: bool) {
        let s = c.symbol.as_str();
        if no_instrument && !c.readout.divisions {
            self.flags.push(Flag {
                warn: false,
                span: Some(c.span),
                message: if s == "f" {
                    "no instrument for column f (no `counter`, no `generator`): the frequency is taken as exact".to_string()
                } else {
                    format!("no instrument for column {s}: its Type B uncertainty is not included")
                },
            });
        }
        if c.readout.peak_to_peak {
            self.flags.push(Flag {
                warn: false,
                span: Some(c.span),
                message: format!(
                    "{s} was read peak to peak (`{}`) and converted to RMS as Vpp/(2√2): sine assumed",
                    c.heading
                ),
            });
        }
    }

    /// The Type B terms of a voltage column read in divisions on display `inst`: the reading
    /// half-width (`reading`, in div, rectangular) times the column's scale as a per-reading
    /// offset, and the vertical gain (`vertical`) as one gain input for the column and its
    /// scale. A column with no display, or a display with no `reading` in div, is an error at
    /// the heading.
    fn display_terms<'i>(
        &mut self,
        c: &Column,
        inst: Option<(&'i str, &Instrument)>,
    ) -> Result<TypeBTerms<'i>, Diagnostic> {
        let h = c.heading.as_str();
        let Some((iname, i)) = inst else {
            return Err(Diagnostic::new(
                c.span,
                format!("column `{h}` is read off a display, and the block names none"),
            )
            .expected("`display: <instrument>` or `phase: <instrument>` in the block header")
            .found("no `display` and no `phase`"));
        };
        let Some(rd) = i.reading.filter(|r| r.unit == Unit::Div) else {
            return Err(Diagnostic::new(
                c.span,
                format!("column `{h}` is read off {iname}, which gives no reading half-width in divisions"),
            )
            .expected(format!("`reading: 0.1 div` (say) in the entry of {iname}"))
            .found(match i.reading {
                Some(q) => format!("`reading` in {}", q.unit.symbol()),
                None => "no `reading`".to_string(),
            }));
        };
        let k = c.readout.factor();
        let per_div = c.readout.per_div.unwrap_or(1.0);
        let gain = match i.vertical {
            Some(fraction) => {
                self.inputs.push(Input::type_b(
                    format!(
                        "gain({iname},{} {}/div)",
                        c.symbol,
                        crate::print::quantity(per_div, Unit::V)
                    ),
                    1.0,
                    type_b(fraction, i.distribution),
                    dist_of(i.distribution),
                ));
                Some(self.inputs.len() - 1)
            }
            None => {
                self.flags.push(Flag {
                    warn: false,
                    span: Some(i.span),
                    message: format!(
                        "{iname} gives no `vertical` gain accuracy: column {} has no gain uncertainty",
                        c.symbol
                    ),
                });
                None
            }
        };
        Ok(TypeBTerms {
            gain,
            count: None,
            read: Some(type_b(rd.value * k, Distribution::Rectangular)),
        })
    }

    /// The gain input of column `s` read with `i` (`iname`): `fraction` is its accuracy's
    /// percent of reading on `range`. On a range, one input per (instrument, range), made at
    /// its first use; without ranges, one per column.
    fn gain_input(
        &mut self,
        iname: &str,
        i: &Instrument,
        s: &str,
        (range, fraction): (Option<usize>, f64),
    ) -> usize {
        let key = range.map(|r| (iname.to_string(), r));
        if let Some(&g) = key.as_ref().and_then(|k| self.range_gains.get(k)) {
            return g;
        }
        let what = match range.and_then(|r| i.ranges.get(r)) {
            Some(r) => format!("{} range", range_name(&r.full_scale)),
            None => s.to_string(),
        };
        self.inputs.push(Input::type_b(
            format!("gain({iname},{what})"),
            1.0,
            type_b(fraction, i.distribution),
            dist_of(i.distribution),
        ));
        let g = self.inputs.len() - 1;
        if let Some(k) = key {
            self.range_gains.insert(k, g);
        }
        g
    }

    /// Per group: the mean input of column `c` (cell index `ci`; Type A over the group's
    /// repeats) and its offset inputs, with the Type B terms of the group's range (`terms`
    /// per range, and each group's range; no ranges: one entry for None). Returns each
    /// group's mean input (None for `f`).
    fn column_values(
        &mut self,
        block: &ReadingsBlock,
        c: &Column,
        ci: usize,
        inst: Option<(&str, &Instrument)>,
        (terms, ranges): (&[(Option<usize>, TypeBTerms)], &[Option<usize>]),
    ) -> Vec<Option<usize>> {
        let s = c.symbol.as_str();
        let gname = |g: &Group| g.f.map(|f| format!("@{}", hz(f))).unwrap_or_default();
        let none = TypeBTerms {
            gain: None,
            count: None,
            read: None,
        };
        let mut per_group = Vec::with_capacity(self.groups.len());
        let mut idx_per_group = Vec::with_capacity(self.groups.len());
        for (gi, g) in self.groups.iter().enumerate() {
            let range = ranges.get(gi).copied().flatten();
            let terms = terms
                .iter()
                .find(|(r, _)| *r == range)
                .map_or(&none, |(_, t)| t);
            let tag = format!("{s}{}", gname(g));
            let samples: Vec<f64> = g
                .rows
                .iter()
                .filter_map(|&r| block.rows.get(r))
                .filter_map(|r| r.cells.get(ci))
                .map(|c| c.value)
                .collect();
            let mut v = Value {
                base: 0.0,
                mean: None,
                gain: terms.gain,
                offsets: Vec::new(),
            };
            if s == "f" {
                v.base = g.f.unwrap_or(0.0);
                idx_per_group.push(None);
            } else {
                let (mean, u, nu) = type_a(&samples);
                if samples.len() > 1 {
                    self.inputs.push(Input::type_a(tag.clone(), mean, u, nu));
                } else {
                    self.inputs
                        .push(Input::type_b(tag.clone(), mean, 0.0, Dist::Rectangular));
                }
                v.mean = Some(self.inputs.len() - 1);
                idx_per_group.push(Some(self.inputs.len() - 1));
            }
            if let (Some((u, d, label)), Some((iname, _))) = (terms.count, inst) {
                self.inputs
                    .push(Input::type_b(format!("{label}({iname},{tag})"), 0.0, u, d));
                v.offsets.push(self.inputs.len() - 1);
            }
            if let (Some(u), Some((iname, _))) = (terms.read, inst) {
                self.inputs.push(Input::type_b(
                    format!("read({iname},{tag})"),
                    0.0,
                    u,
                    Dist::Rectangular,
                ));
                v.offsets.push(self.inputs.len() - 1);
            }
            if s == "f" {
                if let Some(slot) = self.freq.get_mut(gi) {
                    *slot = Some(v.clone());
                }
            }
            per_group.push(v);
        }
        self.values.insert(s.to_string(), per_group);
        idx_per_group
    }

    /// Type A correlations between columns' means from the same rows (GUM 5.2.3).
    fn type_a_correlations(
        &mut self,
        block: &ReadingsBlock,
        used: &[&str],
        col_inputs: &BTreeMap<String, Vec<Option<usize>>>,
    ) {
        let measured: Vec<&str> = block
            .columns
            .iter()
            .map(|c| c.symbol.as_str())
            .filter(|s| *s != "f" && used.contains(s))
            .collect();
        for (gi, g) in self.groups.iter().enumerate() {
            if g.rows.len() < 2 {
                continue;
            }
            for a in 0..measured.len() {
                for b in a + 1..measured.len() {
                    let (sa, sb) = (measured[a], measured[b]);
                    let (Some(ca), Some(cb)) = (block.col(sa), block.col(sb)) else {
                        continue;
                    };
                    let xa: Vec<f64> = g
                        .rows
                        .iter()
                        .filter_map(|&r| block.rows.get(r)?.cells.get(ca).map(|c| c.value))
                        .collect();
                    let xb: Vec<f64> = g
                        .rows
                        .iter()
                        .filter_map(|&r| block.rows.get(r)?.cells.get(cb).map(|c| c.value))
                        .collect();
                    let r = type_a_correlation(&xa, &xb);
                    let ia = col_inputs
                        .get(sa)
                        .and_then(|v| v.get(gi).copied().flatten());
                    let ib = col_inputs
                        .get(sb)
                        .and_then(|v| v.get(gi).copied().flatten());
                    if let (Some(ia), Some(ib)) = (ia, ib) {
                        if r != 0.0 {
                            self.corr.push((ia, ib, r));
                        }
                    }
                }
            }
        }
    }

    /// Source level check: a group whose Vs departs from the stated level by more than the
    /// meter's limit is flagged and normalised.
    fn source_level(&mut self, ctx: &Context, block: &ReadingsBlock) {
        let (Some(level), Some(vc)) = (block.source, block.col("Vs")) else {
            return;
        };
        let meter = block
            .meter
            .as_ref()
            .and_then(|n| ctx.instruments.get(&n.name));
        for (gi, g) in self.groups.iter().enumerate() {
            for &r in &g.rows {
                let Some(cell) = block.rows.get(r).and_then(|row| row.cells.get(vc)) else {
                    continue;
                };
                let lim = meter
                    .map(|m| accuracy_limit(m, cell.value, Unit::V))
                    .unwrap_or(0.0);
                let tol = lim.max(1e-12 * level.abs());
                if (cell.value - level).abs() > tol {
                    self.flags.push(Flag {
                        warn: true,
                        span: Some(cell.span),
                        message: format!(
                            "Vs = {} V departs from the stated source level {} V by more than the meter's limit (±{} V): the voltages at {} are normalised to {} V",
                            plain(cell.value, 6),
                            plain(level, 6),
                            plain(lim, 3),
                            g.f.map(hz).unwrap_or_else(|| "this block".into()),
                            plain(level, 6)
                        ),
                    });
                    if let Some(n) = self.normalise.get_mut(gi) {
                        *n = true;
                    }
                }
            }
        }
    }

    /// Whether the block has this column.
    pub fn has(&self, symbol: &str) -> bool {
        self.values.contains_key(symbol)
    }

    /// Measured value of a column in a group at inputs `x` (NaN when absent).
    pub fn value(&self, symbol: &str, g: usize, x: &[f64]) -> f64 {
        self.values
            .get(symbol)
            .and_then(|v| v.get(g))
            .map(|v| v.eval(x))
            .unwrap_or(f64::NAN)
    }

    /// A voltage, scaled by source/Vs when the group departs from the stated source level.
    pub fn voltage(&self, symbol: &str, g: usize, x: &[f64]) -> f64 {
        let v = self.value(symbol, g, x);
        match (self.source, self.normalise.get(g)) {
            (Some(level), Some(true)) if VOLTAGES.contains(&symbol) => {
                v * level / self.value("Vs", g, x)
            }
            _ => v,
        }
    }

    /// [`Self::voltage`] of `symbol` in group `g` over a chunk of Monte Carlo trials, into
    /// `out[..c.len]`: the same operations, with the lookups done once.
    pub fn voltage_cols(
        &self,
        symbol: &str,
        g: usize,
    ) -> impl Fn(&Columns, &mut [f64]) + Sync + '_ {
        let value = self.values.get(symbol).and_then(|v| v.get(g));
        let norm = match (self.source, self.normalise.get(g)) {
            (Some(level), Some(true)) if VOLTAGES.contains(&symbol) => {
                Some((level, self.values.get("Vs").and_then(|v| v.get(g))))
            }
            _ => None,
        };
        move |c: &Columns, out: &mut [f64]| {
            match value {
                Some(v) => v.eval_cols(c, out),
                None => out[..c.len].fill(f64::NAN),
            }
            if let Some((level, vs)) = norm {
                let mut s = [0.0; CHUNK];
                match vs {
                    Some(vs) => vs.eval_cols(c, &mut s),
                    None => s.fill(f64::NAN),
                }
                for (o, s) in out[..c.len].iter_mut().zip(&s) {
                    *o = *o * level / s;
                }
            }
        }
    }

    /// [`BlockInputs::f`] over a chunk of Monte Carlo trials, into `out[..c.len]`.
    pub fn f_cols(&self, g: usize, c: &Columns, out: &mut [f64]) {
        match self.freq.get(g).and_then(|v| v.as_ref()) {
            Some(v) => v.eval_cols(c, out),
            None => out[..c.len].fill(f64::NAN),
        }
    }

    /// [`BlockInputs::r`] over a chunk of Monte Carlo trials, into `out[..c.len]`.
    pub fn r_cols(&self, c: &Columns, out: &mut [f64]) {
        let out = &mut out[..c.len];
        match self.resistor.as_ref().map(|(i, _)| c.col(*i)) {
            Some(Col::Drawn(v)) => out.copy_from_slice(v),
            Some(Col::Fixed(v)) => out.fill(v),
            None => out.fill(f64::NAN),
        }
    }

    /// Whether the voltages of group `g` are normalised to the source level.
    pub fn normalised(&self, g: usize) -> bool {
        self.normalise.get(g).copied().unwrap_or(false)
    }

    /// Frequency of group `g` (NaN without an `f` column).
    pub fn f(&self, g: usize, x: &[f64]) -> f64 {
        self.freq
            .get(g)
            .and_then(|v| v.as_ref())
            .map(|v| v.eval(x))
            .unwrap_or(f64::NAN)
    }

    /// Series resistance (NaN when the spec asked for none).
    pub fn r(&self, x: &[f64]) -> f64 {
        self.resistor
            .as_ref()
            .and_then(|(i, _)| x.get(*i).copied())
            .unwrap_or(f64::NAN)
    }

    /// Every input that a quantity of group `g` (or the series resistor) reads, sorted: the
    /// dependency pattern of an output computed from that group alone.
    pub fn group_inputs(&self, g: usize) -> Vec<usize> {
        let mut v: Vec<usize> = Vec::new();
        let mut add = |val: &Value| {
            v.extend(val.mean);
            v.extend(val.gain);
            v.extend(val.offsets.iter().copied());
        };
        for col in self.values.values() {
            if let Some(val) = col.get(g) {
                add(val);
            }
        }
        if let Some(Some(val)) = self.freq.get(g) {
            add(val);
        }
        v.extend(self.resistor.as_ref().map(|r| r.0));
        v.sort_unstable();
        v.dedup();
        v
    }

    /// Values at the estimates.
    pub fn estimates(&self) -> Vec<f64> {
        self.inputs.iter().map(|i| i.value).collect()
    }

    pub fn model(&self) -> Model<'_> {
        Model {
            inputs: &self.inputs,
            corr: &self.corr,
        }
    }
}

/// The block's series resistor as one input (see the module rules).
fn series_resistor(
    ctx: &Context,
    block: &ReadingsBlock,
    flags: &mut Vec<Flag>,
) -> Result<(Input, String), Vec<Diagnostic>> {
    let mut diags = Vec::new();
    let mut found = None;
    for n in &block.parts {
        match ctx.parts.get(&n.name) {
            None => diags.push(
                Diagnostic::new(n.span, format!("unknown part {}", n.name))
                    .expected("a name under `parts` in the front matter")
                    .found(n.name.clone()),
            ),
            Some(p) if p.kind == PartKind::Resistor && found.is_none() => found = Some((n, p)),
            _ => {}
        }
    }
    if !diags.is_empty() {
        return Err(diags);
    }
    let Some((_, part)) = found else {
        return Err(vec![Diagnostic::new(
            block.span,
            "this network needs a series resistor in `parts`",
        )
        .expected("a part of kind resistor listed in the block's `parts`")
        .found(if block.parts.is_empty() {
            "no parts".to_string()
        } else {
            "no resistor".to_string()
        })]);
    };
    Ok((part_input(ctx, part, flags)?, part.name.clone()))
}

/// A part's value as one input (the series resistor's rules, for a part of any kind): its
/// `measured` value with the accuracy of its `by` instrument, else its nominal with the
/// tolerance as a rectangular half-width.
pub fn part_input(
    ctx: &Context,
    part: &crate::notebook::Part,
    flags: &mut Vec<Flag>,
) -> Result<Input, Vec<Diagnostic>> {
    let name = part.name.clone();
    let (unit, kind, quantity) = match part.kind {
        PartKind::Resistor => (Unit::Ohm, "resistor", "resistance"),
        PartKind::Capacitor => (Unit::F, "capacitor", "capacitance"),
        PartKind::Inductor => (Unit::H, "inductor", "inductance"),
    };
    let (value, u, dist) = if let Some(m) = &part.measured {
        let r = m.value;
        let by = part
            .measured_by
            .as_ref()
            .and_then(|b| ctx.instruments.get(b).map(|i| (b, i)));
        match (&part.measured_by, by) {
            (Some(b), None) => {
                return Err(vec![Diagnostic::new(
                    part.span,
                    format!("unknown instrument {b} for the measured value of {name}"),
                )
                .expected("a name under `instruments` in the front matter")
                .found(b.clone())]);
            }
            (None, _) => {
                flags.push(Flag {
                    warn: false,
                    span: Some(part.span),
                    message: format!(
                        "measured value of {name} names no instrument (`by`): taken as exact"
                    ),
                });
                (r, 0.0, Dist::Rectangular)
            }
            (Some(b), Some((_, i))) => {
                if let Some(due) = i.due {
                    if ctx.date > due {
                        flags.push(Flag {
                            warn: true,
                            span: Some(part.span),
                            message: format!(
                                "{name} was measured with {b}, whose calibration fell due on {due}"
                            ),
                        });
                    }
                }
                let on = range_for(i, unit, r);
                let ohm_ranges = i.ranges.iter().any(|x| x.full_scale.unit == unit);
                if on.is_none() && (ohm_ranges || !i.range_accuracy.is_empty()) {
                    return Err(vec![Diagnostic::new(
                        part.span,
                        format!(
                            "no {} range of {b} holds the measured value of {name}",
                            range_word(unit)
                        ),
                    )
                    .expected(format!("a range of {b} that holds {}", range_name(m)))
                    .found(range_name(m))]);
                }
                let acc = accuracy_at(i, on);
                if acc.is_none() && i.resolution.is_none() {
                    flags.push(Flag {
                        warn: false,
                        span: Some(i.span),
                        message: format!("{b} has no accuracy or resolution: the measured value of {name} is taken as exact"),
                    });
                }
                let a = accuracy_limit(i, r, unit);
                let d = if acc.is_some() {
                    i.distribution
                } else {
                    Distribution::Rectangular
                };
                (r, type_b(a, d), dist_of(d))
            }
        }
    } else if let Some(nom) = &part.nominal {
        let r = nom.value;
        let a = match &part.tolerance {
            Some(Tolerance::Relative(t)) | Some(Tolerance::Code(_, t)) => t.abs() * r.abs(),
            Some(Tolerance::Absolute(a)) => a.abs(),
            None => {
                flags.push(Flag {
                    warn: false,
                    span: Some(part.span),
                    message: format!("{name} has neither a measured value nor a tolerance: its nominal is taken as exact"),
                });
                0.0
            }
        };
        (r, type_b(a, Distribution::Rectangular), Dist::Rectangular)
    } else {
        return Err(vec![Diagnostic::new(
            part.span,
            format!("{kind} {name} has neither a measured nor a nominal value"),
        )
        .expected("`measured` or `nominal`")]);
    };
    if !(value.is_finite() && value > 0.0) {
        return Err(vec![Diagnostic::new(
            part.span,
            format!("{quantity} of {name} must be positive"),
        )
        .found(format!("{value} {}", unit.symbol()))]);
    }
    Ok(Input::type_b(name, value, u, dist))
}

/// The word for a meter's ranges of `unit` in messages.
fn range_word(unit: Unit) -> &'static str {
    match unit {
        Unit::Ohm => "ohms",
        Unit::F => "capacitance",
        Unit::H => "inductance",
        _ => unit.symbol(),
    }
}

/// Builders of notebook structs for unit tests.
#[cfg(test)]
pub(crate) mod testutil {
    use crate::diag::Span;
    use crate::notebook::*;
    use crate::quantity::{Quantity, Unit};
    use std::collections::BTreeMap;

    /// The network of that `network:` word.
    pub fn network(name: &str) -> Network {
        Network::all()
            .find(|n| n.name() == name)
            .expect("a network")
    }

    pub fn named(n: &str) -> Named {
        Named {
            name: n.into(),
            span: Span::default(),
        }
    }

    pub fn instrument(
        name: &str,
        accuracy: Option<Accuracy>,
        resolution: Option<Quantity>,
    ) -> Instrument {
        Instrument {
            name: name.into(),
            what: None,
            accuracy,
            resolution,
            bandwidth: None,
            calibrated: None,
            due: None,
            reading: None,
            distribution: Distribution::Rectangular,
            ranges: Vec::new(),
            range_accuracy: Vec::new(),
            vertical: None,
            span: Span::default(),
        }
    }

    pub fn resistor(name: &str, nominal: f64, tol: Option<Tolerance>) -> Part {
        Part {
            name: name.into(),
            kind: PartKind::Resistor,
            nominal: Some(Quantity {
                value: nominal,
                unit: Unit::Ohm,
            }),
            tolerance: tol,
            measured: None,
            measured_by: None,
            dcr: None,
            dcr_by: None,
            rating: None,
            loss: Default::default(),
            span: Span::default(),
        }
    }

    /// A block with the given columns and rows of SI values; each cell gets its own span.
    pub fn block(network: Network, cols: &[(&str, Unit)], rows: &[Vec<f64>]) -> ReadingsBlock {
        let mut pos = 1000;
        let columns = cols
            .iter()
            .map(|(s, u)| Column {
                symbol: s.to_string(),
                unit: *u,
                heading: format!("{s}/{}", u.symbol()),
                range: None,
                readout: Readout::default(),
                span: Span::default(),
            })
            .collect();
        let rows = rows
            .iter()
            .map(|r| {
                let start = pos;
                let cells = r
                    .iter()
                    .map(|v| {
                        pos += 10;
                        Cell {
                            value: *v,
                            text: format!("{v}"),
                            span: Span::new(pos - 10, pos - 2),
                        }
                    })
                    .collect();
                pos += 1;
                Row {
                    cells,
                    span: Span::new(start, pos - 1),
                }
            })
            .collect();
        ReadingsBlock {
            id: "b1".into(),
            id_span: Span::default(),
            network,
            network_span: Span::new(0, 0),
            parts: Vec::new(),
            meter: None,
            phase: None,
            counter: None,
            note: None,
            source: None,
            columns,
            rows,
            span: Span::new(0, 10),
            body: String::new(),
            lot: None,
            model: Vec::new(),
            readout: BlockReadout::default(),
        }
    }

    pub struct Env {
        pub instruments: BTreeMap<String, Instrument>,
        pub parts: BTreeMap<String, Part>,
        pub date: chrono::NaiveDate,
    }

    impl Env {
        pub fn new() -> Env {
            Env {
                instruments: BTreeMap::new(),
                parts: BTreeMap::new(),
                date: chrono::NaiveDate::from_ymd_opt(2026, 3, 14).unwrap(),
            }
        }
        pub fn ctx(&self) -> crate::networks::Context<'_> {
            crate::networks::Context {
                source: "",
                coverage: 0.9545,
                date: self.date,
                instruments: &self.instruments,
                parts: &self.parts,
                lab: None,
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::testutil::*;
    use super::*;
    use crate::notebook::{Accuracy, Network};
    use crate::quantity::{Quantity, Unit};

    // Grouping by repeated f and GUM 4.2 Type A on each group.
    #[test]
    fn repeats_become_type_a_with_correlation() {
        let env = Env::new();
        let b = block(
            Network::Z,
            &[
                ("f", Unit::Hz),
                ("V", Unit::V),
                ("I", Unit::A),
                ("phi", Unit::Rad),
            ],
            &[
                vec![50.0, 1.0, 0.1, 0.2],
                vec![60.0, 2.0, 0.2, 0.3],
                vec![50.0, 1.2, 0.11, 0.25],
            ],
        );
        let spec = Spec {
            network: "Z",
            required: &["V", "I", "phi"],
            optional: &[],
            resistor: false,
        };
        let bi = BlockInputs::build(&env.ctx(), &b, &spec).unwrap();
        assert_eq!(bi.groups.len(), 2);
        assert_eq!(bi.groups[0].rows, vec![0, 2]);
        let x = bi.estimates();
        assert!((bi.value("V", 0, &x) - 1.1).abs() < 1e-15);
        assert_eq!(bi.value("V", 1, &x), 2.0);
        // Two points: r = ±1 (all pairs move together here).
        assert!(bi.corr.iter().all(|c| (c.2.abs() - 1.0).abs() < 1e-12));
        // Four columns without instruments → four flags.
        assert_eq!(
            bi.flags
                .iter()
                .filter(|f| f.message.starts_with("no instrument"))
                .count(),
            4
        );
    }

    // Correlated Type B (GUM 5.2, F.1.2): one gain input per (instrument, column).
    #[test]
    fn gain_is_shared_per_column() {
        let mut env = Env::new();
        env.instruments.insert(
            "dmm".into(),
            instrument(
                "dmm",
                Some(Accuracy::Relative {
                    fraction: 0.005,
                    counts: 2.0,
                }),
                Some(Quantity {
                    value: 1e-3,
                    unit: Unit::V,
                }),
            ),
        );
        let mut b = block(
            Network::RC,
            &[("f", Unit::Hz), ("VR", Unit::V)],
            &[vec![100.0, 1.0], vec![200.0, 1.5]],
        );
        b.meter = Some(named("dmm"));
        let spec = Spec {
            network: "RC",
            required: &["VR"],
            optional: &[],
            resistor: false,
        };
        let bi = BlockInputs::build(&env.ctx(), &b, &spec).unwrap();
        let gains: Vec<&Input> = bi
            .inputs
            .iter()
            .filter(|i| i.name.starts_with("gain("))
            .collect();
        assert_eq!(gains.len(), 1);
        assert!((gains[0].u - 0.005 / 3f64.sqrt()).abs() < 1e-15);
        let counts: Vec<&Input> = bi
            .inputs
            .iter()
            .filter(|i| i.name.starts_with("counts("))
            .collect();
        assert_eq!(counts.len(), 2);
        assert!((counts[0].u - 2e-3 / 3f64.sqrt()).abs() < 1e-15);
        assert_eq!(hz(1000.0), "1 kHz");
        assert_eq!(hz(159.1549), "159.155 Hz");
    }

    // FORMAT.md flags: bandwidth exceeded (per row) and calibration overdue (per instrument).
    #[test]
    fn bandwidth_and_due_flags() {
        let mut env = Env::new();
        let mut dmm = instrument(
            "dmm",
            Some(Accuracy::Relative {
                fraction: 0.01,
                counts: 0.0,
            }),
            None,
        );
        dmm.bandwidth = Some(1000.0);
        dmm.due = Some(chrono::NaiveDate::from_ymd_opt(2026, 3, 1).unwrap());
        env.instruments.insert("dmm".into(), dmm);
        let mut b = block(
            Network::RC,
            &[("f", Unit::Hz), ("VR", Unit::V)],
            &[vec![500.0, 1.0], vec![2000.0, 1.0]],
        );
        b.meter = Some(named("dmm"));
        let spec = Spec {
            network: "RC",
            required: &["VR"],
            optional: &[],
            resistor: false,
        };
        let bi = BlockInputs::build(&env.ctx(), &b, &spec).unwrap();
        let bw: Vec<&Flag> = bi
            .flags
            .iter()
            .filter(|f| f.message.contains("bandwidth"))
            .collect();
        assert_eq!(bw.len(), 1);
        assert_eq!(bw[0].span, Some(b.rows[1].span));
        assert!(bi
            .flags
            .iter()
            .any(|f| f.message.contains("calibration of dmm fell due")));
        // Due date not passed: no flag.
        let mut env2 = Env::new();
        env2.date = chrono::NaiveDate::from_ymd_opt(2026, 2, 1).unwrap();
        env2.instruments = env.instruments.clone();
        let bi2 = BlockInputs::build(&env2.ctx(), &b, &spec).unwrap();
        assert!(!bi2.flags.iter().any(|f| f.message.contains("fell due")));
        // Unknown instrument: a diagnostic at its name.
        b.meter = Some(named("nope"));
        assert!(BlockInputs::build(&env.ctx(), &b, &spec).is_err());
    }

    // Series resistor (GUM 4.3.7): measured value with the ohmmeter's limit 0.1 % + 2 counts of
    // 0.1 ohm as a rectangular half-width; else nominal ± tolerance (IEC 60062 F = 1 %).
    #[test]
    fn series_resistor_sources() {
        let mut env = Env::new();
        env.instruments.insert(
            "ohm".into(),
            instrument(
                "ohm",
                Some(Accuracy::Relative {
                    fraction: 0.001,
                    counts: 2.0,
                }),
                Some(Quantity {
                    value: 0.1,
                    unit: Unit::Ohm,
                }),
            ),
        );
        let mut r = resistor(
            "R3",
            820.0,
            Some(crate::notebook::Tolerance::Code('F', 0.01)),
        );
        env.parts.insert("R3".into(), r.clone());
        let mut b = block(
            Network::RC,
            &[("f", Unit::Hz), ("VR", Unit::V)],
            &[vec![500.0, 1.0]],
        );
        b.parts = vec![named("R3")];
        let spec = Spec {
            network: "RC",
            required: &["VR"],
            optional: &[],
            resistor: true,
        };
        let bi = BlockInputs::build(&env.ctx(), &b, &spec).unwrap();
        let (ri, _) = bi.resistor.clone().unwrap();
        assert_eq!(bi.inputs[ri].value, 820.0);
        assert!((bi.inputs[ri].u - 8.2 / 3f64.sqrt()).abs() < 1e-12);
        r.measured = Some(Quantity {
            value: 817.3,
            unit: Unit::Ohm,
        });
        r.measured_by = Some("ohm".into());
        env.parts.insert("R3".into(), r);
        let bi = BlockInputs::build(&env.ctx(), &b, &spec).unwrap();
        let (ri, _) = bi.resistor.clone().unwrap();
        assert_eq!(bi.inputs[ri].value, 817.3);
        assert!((bi.inputs[ri].u - (0.8173 + 0.2) / 3f64.sqrt()).abs() < 1e-12);
    }
}

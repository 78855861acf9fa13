//! Reduction: readings → results, one file per network. Pure maths, no I/O.
//!
//! Adding a network: one file here with a `pub const NETWORK: Descriptor` (its name, columns,
//! checks, judged results, figure and `reduce`), and its module's name in the list below.

pub mod inputs;
pub mod outputs;
pub mod triangle;

use crate::diag::{Diagnostic, Span};
use crate::notebook::{Instrument, Item, Network, Notebook, Part, PartKind, ReadingsBlock};
use crate::quantity::Unit;
use crate::uncertainty::{McInterval, Measured};
use chrono::NaiveDate;
use inputs::Spec;
use std::collections::BTreeMap;

pub mod model;
/// Declares each network's module and lists its descriptor in [`NETWORKS`].
// The networks: a module each, declared plainly (tools such as cargo-mutants find files only
// through plain `mod` lines), and one entry each in `NETWORKS`.
pub mod rc;
pub mod rcloss;
pub mod rcparallel;
pub mod rl;
pub mod rlc;
pub mod rlparallel;
pub mod tank;
pub mod z;

/// Every network, in the order messages list them.
pub const NETWORKS: &[&Descriptor] = &[
    &rc::NETWORK,
    &rl::NETWORK,
    &rlc::NETWORK,
    &z::NETWORK,
    &rcloss::NETWORK,
    &rcparallel::NETWORK,
    &rlparallel::NETWORK,
    &tank::NETWORK,
    &model::NETWORK,
];

/// Everything about one network that the stages read: the parser (name, required columns),
/// the reduction (inputs, checks, `reduce`), judging (results held against a part's
/// tolerance) and rendering (the figure).
#[derive(Debug)]
pub struct Descriptor {
    /// The header's `network:` word, the columns required and read, the series resistor.
    pub spec: Spec<'static>,
    /// Columns whose every reading must be above zero, each with why (for the message; may
    /// be empty).
    pub positive: &'static [(&'static str, &'static str)],
    /// Block results judged against the tolerance of the block's part of the kind given.
    pub judged: &'static [(&'static str, PartKind)],
    pub plot: PlotKind,
    pub reduce: fn(&Context, &ReadingsBlock) -> Result<BlockResult, Vec<Diagnostic>>,
}

/// How a block's figure is drawn (`render/plots.rs`).
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum PlotKind {
    /// Against frequency: the first series of `main` the block has (with the series of
    /// `beside` when that is `main[0]`) and the tolerance band of the `band` result from the
    /// block's part of that kind; then the predicted and measured phase.
    PerFrequency {
        main: &'static [&'static str],
        beside: &'static [&'static str],
        band: (&'static str, PartKind),
    },
    /// The admittance sweep with the fitted curve and markers, residuals below.
    Resonance,
    /// One panel per series of more than one point.
    Series,
}

/// Every reading in the `positive` columns of a descriptor that is not above zero, said at
/// its cell.
pub fn check_positive(block: &ReadingsBlock, positive: &[(&str, &str)]) -> Vec<Diagnostic> {
    let mut d = Vec::new();
    for (s, why) in positive {
        let Some(ci) = block.col(s) else { continue };
        for row in &block.rows {
            if let Some(c) = row.cells.get(ci) {
                if !(c.value > 0.0) {
                    let message = if why.is_empty() {
                        format!("{s} must be positive")
                    } else {
                        format!("{s} must be positive: {why}")
                    };
                    d.push(
                        Diagnostic::new(c.span, message)
                            .expected(format!("{s} > 0"))
                            .found(c.text.clone()),
                    );
                }
            }
        }
    }
    d
}

/// A named result, per frequency (`f` set) or for the whole block.
#[derive(Debug, Clone, PartialEq)]
pub struct NamedResult {
    pub name: String,
    pub f: Option<f64>,
    pub unit: Unit,
    pub m: Measured,
}

#[derive(Debug, Clone, PartialEq)]
pub struct Correlation {
    pub a: String,
    pub b: String,
    pub r: f64,
    /// Frequency (Hz) when both results are per-frequency results at that `f`.
    pub f: Option<f64>,
}

#[derive(Debug, Clone, PartialEq)]
pub struct Flag {
    /// A warning (a failed consistency check, an overdue or out-of-band instrument, a source
    /// departure, an impossible reading) rather than a note on the method: `sign` asks for a
    /// reason (`--accept`) before it signs a record with warnings.
    pub warn: bool,
    /// Where in the notebook (row or cell), when known.
    pub span: Option<Span>,
    pub message: String,
}

/// Data a renderer needs to plot a block (SI units).
#[derive(Debug, Clone, PartialEq, Default)]
pub struct PlotData {
    /// Named series of (x, y, u(y)) points, e.g. "XC", "phase", "phase_measured", "Y".
    pub series: Vec<(String, Vec<(f64, f64, f64)>)>,
    /// Named smooth curves, e.g. the fitted admittance.
    pub curves: Vec<(String, Vec<(f64, f64)>)>,
    /// Named vertical markers (x positions), e.g. f0, f_low, f_high.
    pub markers: Vec<(String, f64)>,
}

#[derive(Debug, Clone, PartialEq)]
pub struct BlockResult {
    pub id: String,
    pub network: Network,
    /// Per-frequency results, in row order of the distinct frequencies.
    pub rows: Vec<NamedResult>,
    /// Block results (no `f`).
    pub results: Vec<NamedResult>,
    pub correlations: Vec<Correlation>,
    pub flags: Vec<Flag>,
    pub plot: PlotData,
}

#[derive(Debug, Clone, PartialEq)]
pub struct Reduction {
    pub blocks: Vec<BlockResult>,
    /// The units of each lot block (whose entry in `blocks` holds only their flags).
    pub lots: Vec<crate::lot::LotReduction>,
}

/// What every network needs from the notebook besides its own block.
#[derive(Debug, Clone, Copy)]
pub struct Context<'a> {
    /// The notebook source (spans index into it).
    pub source: &'a str,
    /// Coverage probability of expanded uncertainties.
    pub coverage: f64,
    /// Date of the readings.
    pub date: NaiveDate,
    pub instruments: &'a BTreeMap<String, Instrument>,
    pub parts: &'a BTreeMap<String, Part>,
    /// What the notebook takes from its lab register.
    pub lab: Option<&'a crate::notebook::register::LabUse>,
}

impl<'a> Context<'a> {
    pub fn new(nb: &'a Notebook) -> Self {
        Context {
            source: &nb.source,
            coverage: nb.front.coverage,
            date: nb.front.date,
            instruments: &nb.front.instruments,
            parts: &nb.front.parts,
            lab: nb.lab.as_ref(),
        }
    }
}

/// Reduces every readings block of the notebook, in order. All blocks are tried; the
/// diagnostics of every failing block are returned together.
pub fn reduce(nb: &Notebook) -> Result<Reduction, Vec<Diagnostic>> {
    let ctx = Context::new(nb);
    let mut blocks = Vec::new();
    let mut lots = Vec::new();
    let mut diags = Vec::new();
    for item in &nb.items {
        if let Item::Readings(b) = item {
            if b.lot.is_some() {
                match crate::lot::reduce(&ctx, b) {
                    Ok((r, lot)) => {
                        blocks.push(r);
                        lots.push(lot);
                    }
                    Err(d) => diags.extend(d),
                }
                continue;
            }
            match reduce_block(&ctx, b) {
                Ok(mut r) => {
                    fence(&mut r);
                    blocks.push(r)
                }
                Err(d) => diags.extend(d),
            }
        }
    }
    if diags.is_empty() {
        Ok(Reduction { blocks, lots })
    } else {
        Err(diags)
    }
}

/// One block, by its network's `reduce`.
pub fn reduce_block(ctx: &Context, b: &ReadingsBlock) -> Result<BlockResult, Vec<Diagnostic>> {
    (b.network.descriptor().reduce)(ctx, b)
}

/// Says a maths error that carries no span of its own (a singular fit, a non-finite output)
/// at the whole block: "block <id> could not be reduced: …".
pub trait AtBlock<T> {
    fn at_block(self, block: &ReadingsBlock) -> Result<T, Vec<Diagnostic>>;
}

impl<T, E: std::fmt::Display> AtBlock<T> for Result<T, E> {
    fn at_block(self, block: &ReadingsBlock) -> Result<T, Vec<Diagnostic>> {
        self.map_err(|e| {
            let message = format!("block {} could not be reduced: {e}", block.id);
            vec![Diagnostic::new(block.span, message)]
        })
    }
}

/// Whether every number of `m` (value, u, k, U, ν, budget, Monte Carlo) is finite; ν = ∞ is
/// written `None`, so a finite `Some` is required.
fn all_finite(m: &Measured) -> bool {
    let nu = |d: Option<f64>| d.is_none_or(f64::is_finite);
    [m.value, m.u, m.k, m.expanded]
        .iter()
        .all(|x| x.is_finite())
        && nu(m.dof)
        && m.budget.iter().all(|b| {
            [b.estimate, b.u, b.sensitivity, b.contribution]
                .iter()
                .all(|x| x.is_finite())
                && nu(b.dof)
        })
        && m.mc.as_ref().is_none_or(mc_finite)
}

fn mc_finite(mc: &McInterval) -> bool {
    [mc.mean, mc.u, mc.low, mc.high]
        .iter()
        .all(|x| x.is_finite())
}

/// The last check before a block result goes to judging: no non-finite number passes. The
/// networks guard each quotient, root and ratio where it arises; anything they missed is left
/// out here with a flag that names it, never printed as inf or NaN and never dropped silently.
pub fn fence(b: &mut BlockResult) {
    let mut flags = Vec::new();
    let mut say = |what: String| {
        flags.push(Flag {
            warn: true,
            span: None,
            message: format!(
                "{what} is left out: it could not be computed as a finite number (an internal guard missed this: please report it with the notebook)"
            ),
        })
    };
    let label = |r: &NamedResult| match r.f {
        Some(f) => format!("{} at {}", r.name, crate::print::hz(f)),
        None => format!("{} (block)", r.name),
    };
    for list in [&mut b.rows, &mut b.results] {
        for r in list.iter_mut() {
            if r.m.mc.as_ref().is_some_and(|mc| !mc_finite(mc)) {
                r.m.mc = None;
                say(format!("the Monte Carlo interval of {}", label(r)));
            }
        }
        list.retain(|r| {
            let ok = all_finite(&r.m) && r.f.is_none_or(f64::is_finite);
            if !ok {
                say(label(r));
            }
            ok
        });
    }
    b.correlations.retain(|c| {
        let ok = c.r.is_finite() && c.f.is_none_or(f64::is_finite);
        if !ok {
            say(format!("the correlation of {} and {}", c.a, c.b));
        }
        ok
    });
    // Plot points repeat results already checked above; a bad point is simply not drawn.
    for (_, pts) in &mut b.plot.series {
        pts.retain(|p| p.0.is_finite() && p.1.is_finite() && p.2.is_finite());
    }
    for (_, pts) in &mut b.plot.curves {
        pts.retain(|p| p.0.is_finite() && p.1.is_finite());
    }
    b.plot.markers.retain(|m| m.1.is_finite());
    b.flags.extend(flags);
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::notebook::SYMBOLS;

    #[test]
    fn every_descriptor_is_consistent() {
        let mut names: Vec<&str> = NETWORKS.iter().map(|d| d.spec.network).collect();
        names.sort_unstable();
        names.dedup();
        assert_eq!(names.len(), NETWORKS.len(), "network names must differ");
        for d in NETWORKS {
            let n = d.spec.network;
            let read: Vec<&str> = d
                .spec
                .required
                .iter()
                .chain(d.spec.optional)
                .copied()
                .collect();
            for c in &read {
                assert!(SYMBOLS.contains(c), "{n}: column {c} is no column symbol");
            }
            for (c, _) in d.positive {
                assert!(read.contains(c), "{n}: {c} is checked but not read");
            }
            if let PlotKind::PerFrequency { main, band, .. } = d.plot {
                assert!(
                    main.contains(&band.0),
                    "{n}: band {} is not plotted",
                    band.0
                );
                assert!(
                    d.judged.contains(&band),
                    "{n}: band {} is not judged",
                    band.0
                );
            }
            assert_eq!(
                Network::all()
                    .find(|x| x.name() == n)
                    .map(|x| x.descriptor().spec.network),
                Some(n)
            );
        }
    }
}

//! Named outputs of a block model. Each output is named (and given its unit) when it is laid
//! out, and the model computes every output from its name, so no code depends on the order in
//! which values are pushed.

use super::NamedResult;
use crate::quantity::Unit;
use crate::uncertainty::Measured;

/// What one output of a block model is: a result of one frequency group, or of the block.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Out {
    Row(usize, &'static str),
    Block(&'static str),
}

/// The outputs of a block model, in the order the propagation returns them.
#[derive(Debug, Clone, Default)]
pub struct Outputs {
    list: Vec<(Out, Unit)>,
}

impl Outputs {
    /// Adds a result of group `g`; returns its index.
    pub fn row(&mut self, g: usize, name: &'static str, unit: Unit) -> usize {
        self.list.push((Out::Row(g, name), unit));
        self.list.len() - 1
    }

    /// Adds a result of the whole block; returns its index.
    pub fn block(&mut self, name: &'static str, unit: Unit) -> usize {
        self.list.push((Out::Block(name), unit));
        self.list.len() - 1
    }

    pub fn len(&self) -> usize {
        self.list.len()
    }

    pub fn is_empty(&self) -> bool {
        self.list.is_empty()
    }

    /// Where an output is, if it was laid out.
    pub fn index(&self, o: Out) -> Option<usize> {
        self.list.iter().position(|(x, _)| *x == o)
    }

    /// Every output with its index and unit.
    pub fn iter(&self) -> impl Iterator<Item = (usize, Out, Unit)> + '_ {
        self.list.iter().enumerate().map(|(k, (o, u))| (k, *o, *u))
    }

    /// The group of each output (None for block outputs).
    pub fn group_of(&self, k: usize) -> Option<usize> {
        match self.list.get(k) {
            Some((Out::Row(g, _), _)) => Some(*g),
            _ => None,
        }
    }

    /// The dependency pattern of the outputs for `propagate_sparse`: each row output reads its
    /// group's inputs and the shared ones (`bi.group_inputs`); block outputs are left empty.
    pub fn pattern(&self, bi: &super::inputs::BlockInputs) -> Vec<Vec<usize>> {
        (0..self.len())
            .map(|k| {
                self.group_of(k)
                    .map(|g| bi.group_inputs(g))
                    .unwrap_or_default()
            })
            .collect()
    }

    /// The model's values: rows from `row(g, name)`, then each block output from
    /// `block(name, values so far)`, every one by its name.
    pub fn eval(
        &self,
        row: impl Fn(usize, &str) -> f64,
        block: impl Fn(&str, &[f64]) -> f64,
    ) -> Vec<f64> {
        let mut y = Vec::with_capacity(self.list.len());
        for (o, _) in &self.list {
            let v = match o {
                Out::Row(g, n) => row(*g, n),
                Out::Block(n) => block(n, &y),
            };
            y.push(v);
        }
        y
    }

    /// The value of output `o` among `y` (the model's values), NaN when absent.
    pub fn value(&self, y: &[f64], o: Out) -> f64 {
        self.index(o)
            .and_then(|k| y.get(k).copied())
            .unwrap_or(f64::NAN)
    }

    /// Named results of the row outputs, with each group's frequency.
    pub fn rows(
        &self,
        results: &[Measured],
        f_of: impl Fn(usize) -> Option<f64>,
    ) -> Vec<NamedResult> {
        self.iter()
            .filter_map(|(k, o, unit)| match o {
                Out::Row(g, name) => Some(NamedResult {
                    name: name.to_string(),
                    f: f_of(g),
                    unit,
                    m: results.get(k)?.clone(),
                }),
                Out::Block(_) => None,
            })
            .collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn outputs_are_found_by_name_whatever_the_order() {
        let mut o = Outputs::default();
        let a = o.row(0, "C", Unit::F);
        let b = o.row(1, "C", Unit::F);
        let m = o.block("C", Unit::F);
        assert_eq!((a, b, m), (0, 1, 2));
        let y = o.eval(
            |g, n| if n == "C" { 1.0 + g as f64 } else { f64::NAN },
            |n, y| if n == "C" { (y[0] + y[1]) / 2.0 } else { 0.0 },
        );
        assert_eq!(y, vec![1.0, 2.0, 1.5]);
        assert_eq!(o.value(&y, Out::Row(1, "C")), 2.0);
        assert!(o.value(&y, Out::Row(2, "C")).is_nan());
        assert_eq!(o.group_of(1), Some(1));
        assert_eq!(o.group_of(2), None);
    }
}

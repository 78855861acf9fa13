//! benchrec: a bench notebook of AC readings becomes a typeset, uncertainty-aware PDF record.
//!
//! Data flows one way: [`notebook`] (parse) → [`networks`] (reduce, pure maths) →
//! [`judge`] (verdicts, safety, sign-off state) → [`render`] (typst) → the CLI writes the file.

pub mod diag;
pub mod quantity;
pub mod notebook;
pub mod uncertainty;
pub mod montecarlo;
pub mod networks;
pub mod judge;
pub mod signoff;
pub mod export;
pub mod render;
pub mod pipeline;
pub mod batch;
pub mod starter;

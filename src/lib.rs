//! benchrec: a bench notebook of AC readings becomes a typeset, uncertainty-aware PDF record.
//!
//! Data flows one way: [`notebook`] (parse) → [`networks`] (reduce, pure maths) →
//! [`judge`] (verdicts, safety, sign-off state) → [`render`] (typst) → the CLI writes the file.

#[cfg(feature = "typeset")]
pub mod attest;
#[cfg(feature = "typeset")]
pub mod batch;
pub mod diag;
pub mod export;
#[cfg(feature = "typeset")]
pub mod index;
pub mod judge;
pub mod lot;
pub mod montecarlo;
pub mod networks;
pub mod notebook;
#[cfg(feature = "typeset")]
pub mod pipeline;
pub mod print;
pub mod quantity;
#[cfg(feature = "typeset")]
pub mod render;
pub mod signoff;
pub mod starter;
pub mod trend;
pub mod uncertainty;

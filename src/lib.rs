//! unblend: multicomponent analysis of UV-vis absorbance spectra.
//!
//! The engine fits each measured spectrum as an additive Beer–Lambert sum
//!
//! ```text
//! A(λ) = l·Σ εᵢ(λ)·cᵢ + baseline(λ),   cᵢ ≥ 0,
//! ```
//!
//! with non-negative least squares, and reports concentrations with their
//! standard errors, blend ratios and fit diagnostics.
//!
//! Data flows one way through the modules:
//! [`input`] (CSV parsers) → [`spectrum`] and [`reference`] (validated model)
//! → [`preprocess`] (range, interpolation, baseline) → [`solver`] (NNLS) →
//! [`fit`] (results and flags) → [`output`] (table, CSV, JSON).
#![warn(missing_docs)]
// Nothing panics on user input (STYLE.md): no unwrap/expect outside tests.
#![cfg_attr(not(test), deny(clippy::unwrap_used, clippy::expect_used))]

pub mod atomic;
pub mod batch;
pub mod calibrate;
#[cfg(feature = "cli")]
pub mod cli;
pub mod colour;
pub mod curves;
pub mod dates;
pub mod diagnostics;
pub mod discover;
pub mod emission;
pub mod error;
pub mod fit;
pub mod guard;
pub mod input;
pub mod limits;
pub mod output;
pub mod preprocess;
pub mod ranges;
pub mod reference;
pub mod report;
pub mod separability;
pub mod solver;
pub mod spectrum;
pub mod stats;
pub mod target;

pub use error::{Error, Result};

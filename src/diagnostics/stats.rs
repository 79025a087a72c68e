//! The distribution functions now live in [`crate::stats`]; this re-export
//! keeps the `diagnostics::stats` paths working.

pub use crate::stats::*;

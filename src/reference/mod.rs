//! Reference components (stage 2, beside the spectra model): the molar
//! absorptivity curves a mixture is fitted with, and the folder that holds
//! them.
//!
//! In: component files (`<name>.toml` in a library folder) or ε tables.
//! Out: [`Component`] values, selected into an ordered [`ReferenceSet`].

pub mod component;
pub mod emission;
pub mod store;

pub use component::{Calibration, Component, Conditions, Source};
pub use emission::EmissionCurve;
pub use store::{Library, ReferenceSet};

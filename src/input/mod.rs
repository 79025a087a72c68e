//! Input stage: parsers for everything a user hands the tool.
//!
//! In: bytes of CSV files. Out: validated spectra ([`spectra`]) and molar
//! absorptivity tables ([`epsilon`]); plate reads in the plate-grid layout
//! ([`plate`]), inputs of any layout cut into plates as they stream in
//! ([`plates`]), and plate maps ([`platemap`]). Parsers never solve anything.

pub mod asdf;
pub mod concentrations;
pub mod emission;
pub mod epsilon;
pub mod fields;
pub mod jcamp;
pub mod kind;
pub mod plate;
pub mod platemap;
pub mod plates;
pub mod quantity;
pub mod samples;
pub mod shape;
pub mod spectra;
pub mod table;
pub mod workbook;

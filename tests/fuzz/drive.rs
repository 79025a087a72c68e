//! Feeds arbitrary bytes to each input parser. Shared by the fuzz targets
//! (`tests/fuzz/fuzz_targets/*.rs`) and by the regression test that replays
//! the kept corpus in the normal suite (`tests/fuzz_regressions.rs`).
//!
//! Each function must return without panicking whatever the bytes are; an
//! `Err` is a fine outcome. Where a parser accepts the input, the values it
//! hands on are checked against the guarantees later stages rely on
//! (finite numbers, ascending wavelengths, consistent lengths).
#![allow(dead_code)]

use unblend::input::fields::OverflowMarkers;
use unblend::input::spectra::{self, Quantity, ReadOptions};
use unblend::input::{concentrations, epsilon, jcamp, plate, platemap, plates, table, workbook};
use unblend::reference::Component;

const QUANTITIES: [Quantity; 4] = [
    Quantity::Absorbance,
    Quantity::AbsorbanceNatural,
    Quantity::Transmittance,
    Quantity::TransmittancePercent,
];

/// The quantity to read with, picked from the input so every conversion is
/// exercised.
fn quantity(data: &[u8]) -> Quantity {
    QUANTITIES[data
        .first()
        .map_or(0, |b| usize::from(*b) % QUANTITIES.len())]
}

fn ascending(xs: &[f64]) -> bool {
    xs.windows(2).all(|w| w[0] < w[1])
}

/// Spectrum CSV, wide and long layouts (the layout is detected from the
/// header, so one entry point covers both).
pub fn spectra(data: &[u8]) {
    // Both reading modes: overflow markers fail the row (`fit`) or become
    // saturated points, +inf (plate batches).
    let overflow_as_saturated = data.get(1).is_some_and(|b| b % 2 == 1);
    let options = ReadOptions {
        quantity: Some(quantity(data)),
        overflow_as_saturated,
        ..Default::default()
    };
    let Ok(file) = spectra::read(data, options.clone()) else {
        return;
    };
    raw_rows_agree(data, &options, &file);
    check_file(&file, overflow_as_saturated);
}

/// What a `SpectraFile` promises: ascending grids, one row of finite values
/// (or saturated points) per sample, every sample once.
fn check_file(file: &spectra::SpectraFile, overflow_as_saturated: bool) {
    let mut positions: Vec<usize> = file.failures.iter().map(|f| f.position).collect();
    for block in &file.blocks {
        let grid = block.grid.wavelengths_nm();
        assert!(ascending(grid), "accepted grid is not ascending");
        assert_eq!(block.absorbance_au.len(), block.ids.len() * grid.len());
        assert!(
            block
                .absorbance_au
                .iter()
                .all(|v| v.is_finite() || (overflow_as_saturated && plate::is_saturated(*v)))
        );
        positions.extend(&block.positions);
    }
    positions.sort_unstable();
    assert!(
        positions.iter().enumerate().all(|(i, p)| i == *p),
        "positions are not 0..n"
    );
    assert_eq!(positions.len(), file.n_samples);
}

/// Any text layout under any metadata block, read by the general reader,
/// every quantity (or none, so the file decides).
pub fn table(data: &[u8]) {
    let q = data
        .get(1)
        .is_some_and(|b| b % 2 == 1)
        .then(|| quantity(data));
    let options = ReadOptions {
        quantity: q,
        overflow_as_saturated: data.get(2).is_some_and(|b| b % 2 == 1),
        overflow_markers: OverflowMarkers::new(&["over"]),
        fallback_name: Some("fuzz".into()),
    };
    if let Ok(file) = table::read(data, &options, &table::Part::default()) {
        check_file(&file, options.overflow_as_saturated);
    }
}

/// JCAMP-DX files (AFFN, ASDF, XYPOINTS, linked blocks).
pub fn jcamp(data: &[u8]) {
    let options = ReadOptions {
        quantity: data
            .get(3)
            .is_some_and(|b| b % 2 == 1)
            .then(|| quantity(data)),
        ..Default::default()
    };
    if let Ok(file) = jcamp::read(data, &options) {
        check_file(&file, false);
    }
}

/// Spreadsheet workbooks (the bytes of .xlsx/.ods files, damaged or not).
pub fn workbook(data: &[u8]) {
    if let Ok(file) = workbook::read(data, &ReadOptions::default()) {
        check_file(&file, false);
    }
}

/// The streamed path of `fit` (raw chunks, each row parsed where it is
/// fitted) reads the same rows, values and failures as `read`.
fn raw_rows_agree(data: &[u8], options: &ReadOptions, file: &spectra::SpectraFile) {
    let Ok(spectra::Opened::Wide(mut stream)) = spectra::open(data, options.clone()) else {
        return;
    };
    let header = stream.header.clone();
    let n = header.grid.len();
    let mut ids = Vec::new();
    let mut values = Vec::new();
    let mut failed = 0;
    let mut spare = None;
    let mut row = vec![0.0; n];
    while let Ok(Some(chunk)) = stream.next_raw_chunk(spare.take()) {
        let mut scratch = Vec::new();
        for (i, l) in chunk.lines.iter().enumerate() {
            match header.parse_row(chunk.line(i), l.line_no, options, &mut row, &mut scratch) {
                Ok(id) => {
                    ids.push(id);
                    values.extend_from_slice(&row);
                }
                // `read` reads such a file again, leaving the reading out.
                Err((_, e)) if spectra::fails_on_missing_reading(&e) => return,
                Err(_) => failed += 1,
            }
        }
        spare = Some(chunk.text);
    }
    let block_ids: Vec<&String> = file.blocks.iter().flat_map(|b| &b.ids).collect();
    assert_eq!(ids.iter().collect::<Vec<_>>(), block_ids, "rows differ");
    assert_eq!(failed, file.failures.len(), "failures differ");
    let block_values: Vec<u64> = file
        .blocks
        .iter()
        .flat_map(|b| b.absorbance_au.iter().map(|v| v.to_bits()))
        .collect();
    let raw_values: Vec<u64> = values.iter().map(|v| v.to_bits()).collect();
    assert_eq!(raw_values, block_values, "values differ");
}

/// Molar absorptivity tables (`library add --from`).
pub fn epsilon(data: &[u8]) {
    if let Ok(table) = epsilon::read(data) {
        let grid = table.grid.wavelengths_nm();
        assert!(ascending(grid), "accepted ε grid is not ascending");
        assert_eq!(table.epsilon_l_per_mol_cm.len(), grid.len());
        assert!(table.epsilon_l_per_mol_cm.iter().all(|v| v.is_finite()));
    }
}

/// Calibration concentration files, with and without a unit flag and a
/// molar mass.
pub fn concentrations(data: &[u8]) {
    for unit in [None, Some(concentrations::ConcentrationUnit::MgPerL)] {
        if let Ok(table) = concentrations::read(data, unit) {
            for molar_mass in [None, Some(294.18)] {
                if let Ok(standards) = table.standards(molar_mass) {
                    for s in standards {
                        assert!(s.concentration_mol_per_l.is_finite());
                        assert!(s.concentration_mol_per_l >= 0.0);
                    }
                }
            }
        }
    }
}

/// Plate grids, one plate parsed directly and the same bytes as a stream
/// of plates (any layout).
pub fn plate_grid(data: &[u8]) {
    let q = plate::Reading {
        quantity: quantity(data),
        overflow_markers: OverflowMarkers::new(&["over"]),
    };
    if let Ok(p) = plate::parse_grid(data, 1, "fuzz", &q) {
        check_plate(&p);
    }
    let Ok(mut stream) = plates::PlateStream::open(data, "fuzz", &q) else {
        return;
    };
    // A stream over bytes cannot fail on I/O; stop at the first error anyway.
    while let Ok(Some(raw)) = stream.next_plate() {
        if let Ok(p) = raw.parse(&q) {
            check_plate(&p);
        }
    }
}

/// What `PlateSpectra` promises: one row per well, every value finite or a
/// saturated reading (`+inf`).
fn check_plate(p: &plate::PlateSpectra) {
    let n = p.grid.as_ref().map_or(0, |g| g.len());
    assert_eq!(p.absorbance_au.len(), p.wells.len() * n);
    assert!(
        p.absorbance_au
            .iter()
            .all(|v| v.is_finite() || plate::is_saturated(*v))
    );
}

/// Plate maps.
pub fn platemap(data: &[u8]) {
    if let Ok(map) = platemap::read(data) {
        let _ = map.for_plate("fuzz");
        for name in map.plates.keys() {
            let _ = map.for_plate(name);
        }
    }
}

/// Component files (`<name>.toml`): read, written back and read again.
pub fn component(data: &[u8]) {
    let text = String::from_utf8_lossy(data);
    let Ok(c) = Component::from_toml(&text, "fuzz.toml") else {
        return;
    };
    let (lo, hi) = c.range_nm();
    assert!(lo <= hi, "range {lo}..{hi} nm is reversed");
    let _ = c.epsilon_at(0.5 * (lo + hi));
    let again = Component::from_toml(&c.to_toml(), "fuzz.toml");
    assert!(
        again.is_ok(),
        "a component that was read does not read back: {again:?}"
    );
}

/// Results files for `unblend report`: fit results (JSON, with curves) or a
/// batch's plates. Whatever `report::check` lets through must draw without
/// panicking (the hardening campaign found unequal curve lengths panicking
/// in the SVG code).
pub fn report(data: &[u8]) {
    use unblend::report::check;
    use unblend::report::plates::{PlateReport, RunHead};
    if let Ok(doc) = serde_json::from_slice::<unblend::output::JsonReport>(data)
        && check::results(&doc).is_ok()
    {
        let _ = unblend::report::render_html(&doc, "fuzz");
    }
    #[derive(serde::Deserialize)]
    struct Run {
        components: Vec<String>,
        plates: Vec<unblend::batch::PlateResult>,
    }
    if let Ok(run) = serde_json::from_slice::<Run>(data)
        && check::plates(&run.plates).is_ok()
    {
        let mut report = PlateReport::new(run.components);
        for p in &run.plates {
            report.plate(p);
        }
        let head = RunHead {
            title: "fuzz".into(),
            tool: "unblend".into(),
            rows: Vec::new(),
            warnings: Vec::new(),
        };
        let _ = report.finish(&head);
    }
}

/// A parser driver: bytes in, no panic out.
pub type Target = fn(&[u8]);

/// Every target by name (the folder names under `corpus/` and `regressions/`).
pub const TARGETS: [(&str, Target); 10] = [
    ("spectra", spectra),
    ("table", table),
    ("jcamp", jcamp),
    ("workbook", workbook),
    ("epsilon", epsilon),
    ("concentrations", concentrations),
    ("plate_grid", plate_grid),
    ("platemap", platemap),
    ("component", component),
    ("report", report),
];

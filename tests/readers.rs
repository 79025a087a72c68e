//! Every input shape the readers take, on invented files (the ink-workshop
//! demo scenario; no real instrument's files): wide, long, wavelength-down
//! and single-spectrum tables with and without a metadata block, comma,
//! semicolon and tab, decimal comma, the quantity from a heading or a
//! metadata line and the option winning over it, JCAMP-DX in AFFN and DIF
//! form with the Y-check, .xlsx and .ods workbooks, and the same spectra in
//! every layout giving the same concentrations to the last printed digit.

use std::path::{Path, PathBuf};
use std::process::Command;
use unblend::input::fields::OverflowMarkers;
use unblend::input::spectra::{self, Layout, Quantity, ReadOptions, SpectraFile};

const BIN: &str = env!("CARGO_BIN_EXE_unblend");
const ROOT: &str = env!("CARGO_MANIFEST_DIR");

/// Absorbances read from text are the nearest doubles to the printed
/// decimals; converted ones (A = 2 − log10 %T) carry a few ulps of the
/// logarithm.
const CONVERTED_TOLERANCE_AU: f64 = 1e-12;

fn fixture(name: &str) -> Vec<u8> {
    std::fs::read(format!("{ROOT}/tests/fixtures/readers/{name}")).expect("fixture exists")
}

fn read(bytes: &[u8]) -> SpectraFile {
    spectra::read(bytes, ReadOptions::default()).expect("file is read")
}

/// `(sample, wavelengths, absorbances)` of every sample, in input order.
fn samples(file: &SpectraFile) -> Vec<(String, Vec<f64>, Vec<f64>)> {
    let mut out = Vec::new();
    for b in &file.blocks {
        for (i, id) in b.ids.iter().enumerate() {
            out.push((
                b.positions[i],
                id.clone(),
                b.grid.wavelengths_nm().to_vec(),
                b.row(i).to_vec(),
            ));
        }
    }
    out.sort_by_key(|s| s.0);
    out.into_iter().map(|(_, id, w, a)| (id, w, a)).collect()
}

fn close(a: &[f64], b: &[f64]) -> bool {
    a.len() == b.len()
        && a.iter()
            .zip(b)
            .all(|(x, y)| (x - y).abs() <= CONVERTED_TOLERANCE_AU)
}

#[test]
fn a_wide_table_under_a_metadata_block_keeps_the_metadata_and_leaves_n_a_out() {
    let f = read(&fixture("wide-metadata.csv"));
    assert_eq!(f.layout, Layout::Wide);
    let s = samples(&f);
    assert_eq!(
        s[0],
        (
            "lot-7-a".into(),
            vec![400.0, 405.0, 410.0],
            vec![0.1, 0.3, 0.3]
        )
    );
    // One of three readings missing is a third, more than 10 %: it fails.
    assert_eq!(s.len(), 1);
    let e = f.failures[0].error.to_string();
    assert!(
        e.contains("line 7") && e.contains("column 3") && e.contains("1 of 3"),
        "{e}"
    );
    let meta = &f.sections[0].metadata;
    assert!(
        meta.contains(&("Operator".into(), "K. Lund".into())),
        "{meta:?}"
    );
    assert!(
        meta.contains(&("Date".into(), "2026-11-02".into())),
        "{meta:?}"
    );
}

#[test]
fn wavelengths_down_with_tabs_and_decimal_commas_are_one_column_per_sample() {
    let f = read(&fixture("down-tab.txt"));
    assert_eq!(f.layout, Layout::WavelengthDown);
    let s = samples(&f);
    assert_eq!(
        s[1],
        (
            "lot-7-b".into(),
            vec![400.0, 405.0, 410.0],
            vec![0.11, 0.32, 0.31]
        )
    );
    assert_eq!(
        f.sections[0].quantity_from,
        "metadata line 'Mode: Absorbance'"
    );
}

#[test]
fn a_single_spectrum_is_named_by_its_metadata_or_else_by_the_file_stem() {
    let f = read(&fixture("single-named.csv"));
    assert_eq!(f.layout, Layout::Single);
    assert_eq!(samples(&f)[0].0, "lot-7-a");
    let options = ReadOptions {
        fallback_name: Some("bench-scan".into()),
        ..Default::default()
    };
    let f = spectra::read(b"nm,Abs\n400,0.1\n410,0.2\n420,0.3\n", options.clone()).unwrap();
    assert_eq!(samples(&f)[0].0, "bench-scan");
    let f = spectra::read(b"400;0,1\n410;0,2\n420;0,3\n", options).unwrap();
    assert_eq!(
        samples(&f)[0],
        (
            "bench-scan".into(),
            vec![400.0, 410.0, 420.0],
            vec![0.1, 0.2, 0.3]
        )
    );
}

#[test]
fn percent_transmittance_is_read_from_a_heading_or_a_metadata_line() {
    // A = 2 − log10(%T) (Beer–Lambert, decadic); 79.43 %T ≈ 0.1000 AU,
    // 50.12 %T ≈ 0.3000 AU.
    for name in ["long-percent-t.csv", "metadata-percent-t.csv"] {
        let f = read(&fixture(name));
        assert_eq!(
            f.sections[0].quantity,
            Quantity::TransmittancePercent,
            "{name}"
        );
        let a = &samples(&f)[0].2;
        let want: Vec<f64> = [79.43f64, 50.12, 50.12]
            .iter()
            .map(|t| 2.0 - t.log10())
            .collect();
        assert!(close(a, &want), "{name}: {a:?}");
        assert!(f.warnings.is_empty(), "{name}: {:?}", f.warnings);
    }
}

#[test]
fn the_option_wins_over_the_file_with_a_warning_naming_both() {
    let options = ReadOptions {
        quantity: Some(Quantity::Absorbance),
        ..Default::default()
    };
    let f = spectra::read(&fixture("long-percent-t.csv"), options).unwrap();
    assert_eq!(samples(&f)[0].2, vec![79.43, 50.12, 50.12]);
    let w = f.warnings.join("\n");
    assert!(
        w.contains("--quantity absorbance") && w.contains("transmittance-percent"),
        "{w}"
    );
}

#[test]
fn percent_transmittance_read_as_absorbance_gets_a_warning_suggesting_the_option() {
    let text = "sample,400,410,420,430\ns1,95.1,80.2,40.5,12.0\ns2,97.0,85.5,50.1,22.3\n";
    let f = read(text.as_bytes());
    let w = f.warnings.join("\n");
    assert!(w.contains("--quantity transmittance-percent"), "{w}");
}

#[test]
fn jcamp_affn_and_dif_forms_read_the_same_spectrum() {
    let affn = read(&fixture("affn.jdx"));
    let dif = read(&fixture("asdf.jdx"));
    assert_eq!(affn.layout, Layout::Jcamp);
    let (a, d) = (samples(&affn), samples(&dif));
    assert_eq!(a[0].0, "fjord-blue-lot-7");
    let want_nm: Vec<f64> = (400..=410).map(f64::from).collect();
    assert_eq!(a[0].1, want_nm);
    // Y × YFACTOR (0.001), the values written into both files by hand.
    let want: Vec<f64> = [100, 120, 150, 190, 240, 300, 330, 340, 335, 320, 300]
        .iter()
        .map(|y| f64::from(*y) * 0.001)
        .collect();
    assert_eq!(a[0].2, want);
    assert_eq!(d[0].2, want);
    assert_eq!(affn.sections[0].quantity_from, "##YUNITS=ABSORBANCE");
}

#[test]
fn a_damaged_y_check_fails_the_spectrum_with_its_line() {
    let f = read(&fixture("asdf-bad-check.jdx"));
    assert!(f.blocks.is_empty());
    let e = f.failures[0].error.to_string();
    assert!(e.starts_with("line 16") && e.contains("Y-check"), "{e}");
}

#[test]
fn jcamp_xypoints_in_wavenumbers_and_linked_blocks_are_read() {
    let f = read(&fixture("xypoints-wavenumber.jdx"));
    let s = samples(&f);
    // 10⁷ / ν̃: 25000 cm⁻¹ = 400 nm, 24000 = 416.67, 20000 = 500; the `?`
    // reading is one of four, more than 10 %: the spectrum fails.
    assert!(s.is_empty());
    assert!(f.failures[0].error.to_string().contains("1 of 4"));
    let f = read(&fixture("linked.jdx"));
    let s = samples(&f);
    assert_eq!(
        s.iter().map(|s| s.0.as_str()).collect::<Vec<_>>(),
        ["well-A1", "well-A2"]
    );
    assert_eq!(s[0].2, s[1].2, "AFFN and SQZ write the same values");
    assert_eq!(s[0].2, vec![0.1, 0.2, 0.3, 0.4]);
}

#[test]
fn workbooks_are_read_sheet_by_sheet_with_the_sheet_in_the_provenance() {
    for name in ["lot-check.xlsx", "lot-check.ods"] {
        let f = read(&fixture(name));
        let s = samples(&f);
        let ids: Vec<&str> = s.iter().map(|s| s.0.as_str()).collect();
        assert_eq!(ids, ["lot-7-a", "lot-7-b", "lot-8-a"], "{name}");
        assert_eq!(s[1].2, vec![0.11, 0.32, 0.31], "{name}");
        assert_eq!(s[2].2, vec![0.2, 0.25, 0.125], "{name}");
        let names: Vec<_> = f.sections.iter().map(|s| s.name.clone().unwrap()).collect();
        assert_eq!(names, ["sheet 'Run 1'", "sheet 'Run 2'"], "{name}");
        assert!(
            f.warnings.iter().any(|w| w.starts_with("sheet 'Notes'")),
            "{name}: {:?}",
            f.warnings
        );
    }
}

#[test]
fn a_file_kind_that_is_not_read_is_named_with_what_to_export() {
    let e = spectra::read(b"%PDF-1.7\n...", ReadOptions::default())
        .unwrap_err()
        .to_string();
    assert!(
        e.contains("PDF") && e.contains("export the spectra as CSV"),
        "{e}"
    );
    let e = spectra::read(b"PK\x03\x04garbage", ReadOptions::default())
        .unwrap_err()
        .to_string();
    assert!(e.contains("not a workbook that can be read"), "{e}");
}

#[test]
fn a_layout_that_does_not_fit_says_which_line_and_why() {
    let e = spectra::read(
        b"wavelength_nm,s1,s2\n400,0.1,0.2,0.3,0.4\n",
        ReadOptions::default(),
    )
    .unwrap_err()
    .to_string();
    assert!(e.contains("line 2: 5 fields, but the header has 3"), "{e}");
}

#[test]
fn user_overflow_words_are_saturated_points_and_unknown_words_name_the_option() {
    let text = b"sample,400,410,420\nA1,0.5,Too High,0.7\n";
    let options = ReadOptions {
        overflow_as_saturated: true,
        overflow_markers: OverflowMarkers::new(&["too high"]),
        ..Default::default()
    };
    let f = spectra::read(text, options).unwrap();
    assert!(samples(&f)[0].2[1].is_infinite());
    let options = ReadOptions {
        overflow_as_saturated: true,
        ..Default::default()
    };
    let f = spectra::read(text, options).unwrap();
    let e = f.failures[0].error.to_string();
    assert!(
        e.starts_with("line 2, column 3 ('Too High')") && e.contains("--overflow-marker"),
        "{e}"
    );
}

// ---- the same spectra in every layout, through the real binary ----

/// A scratch folder removed when dropped.
struct Scratch(PathBuf);

impl Scratch {
    fn new(tag: &str) -> Self {
        let d = std::env::temp_dir().join(format!("unblend-readers-{tag}-{}", std::process::id()));
        let _ = std::fs::remove_dir_all(&d);
        std::fs::create_dir_all(&d).expect("scratch folder");
        Scratch(d)
    }

    fn write(&self, name: &str, bytes: &[u8]) -> String {
        let p = self.0.join(name);
        std::fs::write(&p, bytes).expect("write");
        p.display().to_string()
    }
}

impl Drop for Scratch {
    fn drop(&mut self) {
        let _ = std::fs::remove_dir_all(&self.0);
    }
}

/// The first rows of the demo's wide file, as text cells.
fn demo_rows(n: usize) -> (Vec<String>, Vec<Vec<String>>) {
    let text =
        std::fs::read_to_string(format!("{ROOT}/demo-data/lot-check.csv")).expect("demo data");
    let mut lines = text.lines();
    let header: Vec<String> = lines
        .next()
        .unwrap()
        .split(',')
        .map(str::to_string)
        .collect();
    let rows = lines
        .take(n)
        .map(|l| l.split(',').map(str::to_string).collect())
        .collect();
    (header, rows)
}

/// `fit --format csv` output lines (one per sample) for the inputs.
fn fit_csv(inputs: &[&str]) -> Vec<String> {
    let lib = format!("{ROOT}/library");
    let out = Command::new(BIN)
        .arg("fit")
        .args(inputs)
        .args(["--library", &lib, "--format", "csv", "--no-diagnostics"])
        .env_remove("UNBLEND_LIBRARY")
        .output()
        .expect("binary runs");
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(0), "{inputs:?}: {stderr}");
    String::from_utf8_lossy(&out.stdout)
        .lines()
        .skip(1)
        .map(str::to_string)
        .collect()
}

fn layouts(header: &[String], rows: &[Vec<String>]) -> Vec<(&'static str, String)> {
    let wl = &header[1..];
    let mut wide = String::from("Instrument: bench photometer (invented)\n\n");
    wide.push_str(&header.join(";"));
    wide.push('\n');
    for r in rows {
        wide.push_str(&r.join(";").replace('.', ","));
        wide.push('\n');
    }
    let mut long = String::from("sample\twavelength_nm\tAbs\n");
    let mut down = format!(
        "Operator,K. Lund\nwavelength (nm),{}\n",
        rows.iter()
            .map(|r| r[0].clone())
            .collect::<Vec<_>>()
            .join(",")
    );
    for (j, w) in wl.iter().enumerate() {
        down.push_str(w);
        for r in rows {
            down.push(',');
            down.push_str(&r[j + 1]);
        }
        down.push('\n');
    }
    for r in rows {
        for (j, w) in wl.iter().enumerate() {
            long.push_str(&format!("{}\t{w}\t{}\n", r[0], r[j + 1]));
        }
    }
    vec![("wide.csv", wide), ("long.tsv", long), ("down.csv", down)]
}

#[test]
fn the_same_spectra_give_the_same_concentrations_in_every_layout() {
    let (header, rows) = demo_rows(6);
    let dir = Scratch::new("layouts");
    let mut plain = header.join(",");
    plain.push('\n');
    for r in &rows {
        plain.push_str(&r.join(","));
        plain.push('\n');
    }
    let reference = fit_csv(&[&dir.write("plain.csv", plain.as_bytes())]);
    // One line per sample and component.
    assert_eq!(reference.len(), rows.len() * 3);
    for (name, text) in layouts(&header, &rows) {
        let got = fit_csv(&[&dir.write(name, text.as_bytes())]);
        assert_eq!(got, reference, "{name}");
    }
    // A folder of single-spectrum files, one per sample, named by stem.
    let folder = dir.0.join("singles");
    std::fs::create_dir_all(&folder).unwrap();
    for r in &rows {
        let mut single = String::from("nm,A\n");
        for (j, w) in header[1..].iter().enumerate() {
            single.push_str(&format!("{w},{}\n", r[j + 1]));
        }
        std::fs::write(folder.join(format!("{}.csv", r[0])), single).unwrap();
    }
    std::fs::write(folder.join("notes.md"), "not read: unknown kind").unwrap();
    let got = fit_csv(&[&folder.display().to_string()]);
    let mut want = reference.clone();
    want.sort();
    let mut got_sorted = got.clone();
    got_sorted.sort();
    assert_eq!(got_sorted, want, "folder of single spectra");
    let _ = Path::new(ROOT);
}

//! Tests of the calibration, against scipy and worked examples.

use super::*;
use crate::input::concentrations;
use crate::input::spectra::{self, ReadOptions};

/// Agreement with scipy's printed digits (float64 round-off only).
const SCIPY_TOL: f64 = 1e-12;

#[test]
fn line_fit_matches_scipy_linregress() {
    // scipy.stats.linregress 1.17.1 on these six points.
    let pts: Vec<(f64, f64)> = [0.11, 0.19, 0.32, 0.41, 0.48, 0.62]
        .iter()
        .enumerate()
        .map(|(i, &y)| ((i + 1) as f64, y))
        .collect();
    let f = LineFit::new(&pts).unwrap();
    let close = |a: f64, b: f64| (a - b).abs() <= SCIPY_TOL * b.abs().max(1e-3);
    assert!(close(f.slope, 0.10028571428571428));
    assert!(close(f.intercept, 0.0040000000000000036));
    assert!(close(f.slope_std_error().unwrap(), 0.00438922614163923));
    assert!(close(f.intercept_std_error().unwrap(), 0.01709357996999106));
    assert!(close(f.r_squared().unwrap(), 0.9923959885617624));
    // 2·scipy.stats.t.sf(|a/se(a)|, 4).
    assert!((f.intercept_p_value().unwrap() - 0.8264693183590661).abs() < 1e-10);
}

fn spectra_csv(wavelengths: &[f64], rows: &[(&str, Vec<f64>)]) -> SpectraFile {
    let mut s = String::from("sample");
    for w in wavelengths {
        s.push_str(&format!(",{w}"));
    }
    s.push('\n');
    for (id, a) in rows {
        s.push_str(id);
        for v in a {
            s.push_str(&format!(",{v}"));
        }
        s.push('\n');
    }
    spectra::read(s.as_bytes(), ReadOptions::default()).unwrap()
}

fn standards(text: &str) -> Vec<Standard> {
    concentrations::read(text.as_bytes(), None)
        .unwrap()
        .standards(None)
        .unwrap()
}

/// Noise-free series: ε = [1000, 5000, 2000] at three wavelengths, a
/// blank of 0.05 AU everywhere.
fn clean_series(levels_mol_per_l: &[f64]) -> (SpectraFile, Vec<Standard>) {
    let eps = [1000.0, 5000.0, 2000.0];
    let mut rows = vec![("blank", vec![0.05; 3])];
    let mut conc = String::from("sample,concentration\nblank,0\n");
    let names: Vec<String> = (0..levels_mol_per_l.len())
        .map(|i| format!("s{i}"))
        .collect();
    for (i, c) in levels_mol_per_l.iter().enumerate() {
        rows.push((
            names[i].as_str(),
            eps.iter().map(|e| 0.05 + e * c).collect(),
        ));
        conc.push_str(&format!("{},{c}\n", names[i]));
    }
    let rows: Vec<(&str, Vec<f64>)> = rows.into_iter().collect();
    (spectra_csv(&[400.0, 450.0, 500.0], &rows), standards(&conc))
}

#[test]
fn exact_series_returns_its_absorptivities() {
    let (file, std) = clean_series(&[2e-5, 4e-5, 6e-5, 8e-5, 1e-4]);
    let r = calibrate(
        &file,
        &std,
        &CalibrationOptions::default(),
        &Provenance::default(),
    )
    .unwrap();
    let eps: Vec<f64> = r
        .wavelengths
        .iter()
        .map(|w| w.epsilon_l_per_mol_cm)
        .collect();
    for (got, want) in eps.iter().zip([1000.0, 5000.0, 2000.0]) {
        assert!((got - want).abs() < 1e-9 * want, "{got}");
    }
    let c = &r.calibration;
    assert!((c.band_max_nm - 450.0).abs() < 1e-12);
    assert_eq!((c.n_standards, c.n_levels, c.n_blanks), (5, 5, 1));
    assert!((c.concentration_max_mol_per_l - 1e-4).abs() < 1e-18);
    // Blank-subtracted top absorbance: 5000 × 1e-4.
    assert!((c.max_absorbance_au - 0.5).abs() < 1e-12);
    assert!(c.excluded_standards.is_empty() && c.excluded_wavelengths.is_empty());
}

#[test]
fn pathlength_divides_the_slope() {
    let (file, std) = clean_series(&[2e-5, 4e-5, 6e-5]);
    let options = CalibrationOptions {
        pathlength_cm: 0.5,
        ..Default::default()
    };
    let r = calibrate(&file, &std, &options, &Provenance::default()).unwrap();
    // The absorbances were made for 1 cm: in 0.5 cm the same readings mean twice the ε.
    assert!((r.wavelengths[1].epsilon_l_per_mol_cm - 10_000.0).abs() < 1e-6);
}

#[test]
fn standard_above_the_ceiling_is_left_out() {
    let (file, std) = clean_series(&[2e-5, 4e-5, 6e-5, 8e-5, 5e-4]);
    let r = calibrate(
        &file,
        &std,
        &CalibrationOptions::default(),
        &Provenance::default(),
    )
    .unwrap();
    let ex = &r.calibration.excluded_standards;
    assert_eq!(ex.len(), 1);
    assert_eq!(ex[0].sample, "s4");
    assert!(ex[0].reason.contains("ceiling"), "{}", ex[0].reason);
    assert!((r.calibration.concentration_max_mol_per_l - 8e-5).abs() < 1e-18);
}

#[test]
fn bending_top_level_is_left_out_and_named() {
    // The top standard reads 20 % low at every wavelength.
    let (mut file, std) = clean_series(&[2e-5, 4e-5, 6e-5, 8e-5, 1.6e-4]);
    let n = file.blocks[0].grid.len();
    let top = file.blocks[0].len() - 1;
    for j in 0..n {
        let v = &mut file.blocks[0].absorbance_au[top * n + j];
        *v = 0.05 + 0.8 * (*v - 0.05);
    }
    let r = calibrate(
        &file,
        &std,
        &CalibrationOptions::default(),
        &Provenance::default(),
    )
    .unwrap();
    let ex = &r.calibration.excluded_standards;
    assert_eq!(ex.len(), 1, "{ex:?}");
    assert_eq!(ex[0].sample, "s4");
    assert!(ex[0].reason.contains("-20.0 %"), "{}", ex[0].reason);
    assert!((r.wavelengths[1].epsilon_l_per_mol_cm - 5000.0).abs() < 1e-6);
}

#[test]
fn replicates_give_a_lack_of_fit_test() {
    let eps = 5000.0;
    let mut rows = vec![("b", vec![0.0, 0.0])];
    let mut conc = String::from("sample,concentration\nb,0\n");
    let noise = [0.001, -0.001, 0.0005, -0.0005, 0.0008, -0.0008];
    let names = ["a1", "a2", "b1", "b2", "c1", "c2"];
    for (i, name) in names.iter().enumerate() {
        let c = 2e-5 * (1 + i / 2) as f64;
        rows.push((name, vec![eps * c + noise[i], eps * c * 0.5 + noise[i]]));
        conc.push_str(&format!("{name},{c}\n"));
    }
    let file = spectra_csv(&[400.0, 410.0], &rows);
    let r = calibrate(
        &file,
        &standards(&conc),
        &CalibrationOptions::default(),
        &Provenance::default(),
    )
    .unwrap();
    let lof = r.calibration.lack_of_fit.as_ref().unwrap();
    assert_eq!((lof.df_lack_of_fit, lof.df_pure_error), (1, 3));
    assert!(lof.p_value > 0.05, "{lof:?}");
    assert_eq!(r.calibration.n_levels, 3);
}

/// A noisy series (σ = 0.001 AU, two blanks, five levels) whose blank
/// may read `blank_bias_au` too high.
fn noisy_series(seed: u64, blank_bias_au: f64) -> CalibrationResult {
    use rand::SeedableRng;
    use rand_distr::{Distribution, Normal};
    let mut rng = rand::rngs::StdRng::seed_from_u64(seed);
    let noise = Normal::new(0.0, 0.001).unwrap();
    let mut rows = Vec::new();
    let mut conc = String::from("sample,concentration\n");
    let names = ["b1", "b2", "s1", "s2", "s3", "s4", "s5"];
    for (i, name) in names.iter().enumerate() {
        let c = if i < 2 { 0.0 } else { 2e-5 * (i - 1) as f64 };
        let bias = if i < 2 { blank_bias_au } else { 0.0 };
        rows.push((
            *name,
            vec![
                5000.0 * c + bias + noise.sample(&mut rng),
                2000.0 * c + bias + noise.sample(&mut rng),
            ],
        ));
        conc.push_str(&format!("{name},{c}\n"));
    }
    let file = spectra_csv(&[400.0, 450.0], &rows);
    calibrate(
        &file,
        &standards(&conc),
        &CalibrationOptions::default(),
        &Provenance::default(),
    )
    .unwrap()
}

#[test]
fn intercept_test_holds_its_false_alarm_rate_and_catches_a_bad_blank() {
    // 400 clean series: about 5 % should come out "significant" at
    // p < 0.05 (binomial SD ≈ 1.1 %; 2.5–8 % allows three of them).
    let n = 400;
    let alarms = (0..n)
        .filter(|&seed| noisy_series(seed, 0.0).calibration.intercept_p_value < TEST_ALPHA)
        .count();
    let rate = alarms as f64 / n as f64;
    assert!((0.025..=0.08).contains(&rate), "false-alarm rate {rate}");
    // A blank reading 0.01 AU high (10σ) is caught, with its warning.
    let r = noisy_series(1, 0.01);
    assert!(
        r.calibration.intercept_p_value < 0.01,
        "{}",
        r.calibration.intercept_p_value
    );
    assert!(r.warnings.iter().any(|w| w.contains("bad blank")));
}

#[test]
fn wavelengths_where_the_blank_is_opaque_are_left_out() {
    // Solvent cut-off: below 410 nm the blank (and so every reading)
    // is above 2 AU.
    let w = [400.0, 405.0, 410.0, 420.0, 430.0];
    let solvent = [2.5, 2.2, 0.1, 0.02, 0.0];
    let mut rows = vec![("blank", solvent.to_vec())];
    let mut conc = String::from("sample,concentration\nblank,0\n");
    let names = ["s1", "s2", "s3", "s4"];
    for (i, name) in names.iter().enumerate() {
        let c = 2e-5 * (i + 1) as f64;
        rows.push((*name, solvent.iter().map(|b| b + 5000.0 * c).collect()));
        conc.push_str(&format!("{name},{c}\n"));
    }
    let file = spectra_csv(&w, &rows);
    let r = calibrate(
        &file,
        &standards(&conc),
        &CalibrationOptions::default(),
        &Provenance::default(),
    )
    .unwrap();
    let ex = &r.calibration.excluded_wavelengths;
    assert_eq!(ex.len(), 1, "{ex:?}");
    let nm = |r: [f64; 2]| (r[0].round() as i64, r[1].round() as i64);
    assert_eq!(nm(ex[0].range_nm), (400, 405));
    assert!(
        ex[0].reason.contains("the blank reads above"),
        "{}",
        ex[0].reason
    );
    assert_eq!(nm(r.calibration.range_nm), (410, 430));
    let c = r
        .component("dye", None, None, Conditions::default())
        .unwrap();
    assert_eq!(c.grid.wavelengths_nm(), &[410.0, 420.0, 430.0]);
}

#[test]
fn band_that_changes_shape_at_the_top_loses_its_flank() {
    // The top standard's band shifts (as on aggregation): its maximum
    // stays on the line, one flank reads 15 % low, the other 12 % high
    // (not enough to move the band maximum to that flank).
    let w = [480.0, 490.0, 500.0, 510.0, 520.0];
    let eps = [3000.0, 4000.0, 5000.0, 4000.0, 3000.0];
    let mut rows = vec![("blank", vec![0.0; 5])];
    let mut conc = String::from("sample,concentration\nblank,0\n");
    let names = ["s1", "s2", "s3", "s4", "s5"];
    for (i, name) in names.iter().enumerate() {
        let c = 2e-5 * (i + 1) as f64;
        let mut a: Vec<f64> = eps.iter().map(|e| e * c).collect();
        if i == names.len() - 1 {
            a[1] *= 0.85;
            a[3] *= 1.12;
        }
        rows.push((*name, a));
        conc.push_str(&format!("{name},{c}\n"));
    }
    let file = spectra_csv(&w, &rows);
    let r = calibrate(
        &file,
        &standards(&conc),
        &CalibrationOptions::default(),
        &Provenance::default(),
    )
    .unwrap();
    assert!(r.calibration.excluded_standards.is_empty());
    let ex = &r.calibration.excluded_wavelengths;
    assert_eq!(ex.len(), 2, "{ex:?}");
    assert_eq!(
        (ex[0].range_nm, ex[1].range_nm),
        ([490.0, 490.0], [510.0, 510.0])
    );
    assert!(ex[0].reason.contains("bends away"), "{}", ex[0].reason);
    assert!(r.warnings.iter().any(|w| w.contains("interpolated across")));
}

#[test]
fn standards_on_different_wavelengths_are_an_error() {
    let text = "sample,wavelength_nm,absorbance\n\
                b,400,0\nb,410,0\ns1,400,0.1\ns1,410,0.1\n\
                s2,400,0.2\ns2,410,0.2\ns3,400,0.3\ns3,420,0.3\n";
    let file = spectra::read(text.as_bytes(), ReadOptions::default()).unwrap();
    let e = calibrate(
        &file,
        &standards("sample,concentration\nb,0\ns1,1e-5\ns2,2e-5\ns3,3e-5\n"),
        &CalibrationOptions::default(),
        &Provenance::default(),
    )
    .unwrap_err();
    assert!(e.to_string().contains("different wavelengths"), "{e}");
}

#[test]
fn excluded_role_is_left_out_and_named() {
    let (file, _) = clean_series(&[2e-5, 4e-5, 6e-5, 8e-5]);
    let std = standards(
        "sample,concentration,role\nblank,0,\ns0,2e-5,\ns1,4e-5,\ns2,6e-5,\ns3,8e-5,exclude\n",
    );
    let r = calibrate(
        &file,
        &std,
        &CalibrationOptions::default(),
        &Provenance::default(),
    )
    .unwrap();
    let ex = &r.calibration.excluded_standards;
    assert_eq!(ex.len(), 1);
    assert_eq!(ex[0].sample, "s3");
    assert!(ex[0].reason.contains("role `exclude`"));
    assert_eq!(r.calibration.n_standards, 3);
}

#[test]
fn samples_must_match_both_ways() {
    let (file, _) = clean_series(&[2e-5, 4e-5, 6e-5]);
    let e = calibrate(
        &file,
        &standards("sample,concentration\nblank,0\ns0,2e-5\ns1,4e-5\n"),
        &CalibrationOptions::default(),
        &Provenance::default(),
    )
    .unwrap_err();
    assert!(e.to_string().contains("no row for 's2'"), "{e}");
    let e = calibrate(
        &file,
        &standards("sample,concentration\nblank,0\ns0,2e-5\ns1,4e-5\ns2,6e-5\nzz,1\n"),
        &CalibrationOptions::default(),
        &Provenance::default(),
    )
    .unwrap_err();
    assert!(e.to_string().contains("'zz' (line 6)"), "{e}");
}

#[test]
fn single_level_and_all_blank_are_errors() {
    let (file, _) = clean_series(&[2e-5, 2e-5, 2e-5]);
    let e = calibrate(
        &file,
        &standards("sample,concentration\nblank,0\ns0,2e-5\ns1,2e-5\ns2,2e-5\n"),
        &CalibrationOptions::default(),
        &Provenance::default(),
    )
    .unwrap_err();
    assert!(
        e.to_string().contains("2 or more different concentrations"),
        "{e}"
    );
    let e = calibrate(
        &file,
        &standards("sample,concentration\nblank,0\ns0,0\ns1,0\ns2,0\n"),
        &CalibrationOptions::default(),
        &Provenance::default(),
    )
    .unwrap_err();
    assert!(e.to_string().contains("every concentration"), "{e}");
}

#[test]
fn component_carries_the_calibration() {
    let (file, std) = clean_series(&[2e-5, 4e-5, 6e-5, 8e-5]);
    let r = calibrate(
        &file,
        &std,
        &CalibrationOptions::default(),
        &Provenance::default(),
    )
    .unwrap();
    let c = r
        .component("dye", Some(500.0), None, Conditions::default())
        .unwrap();
    let back = Component::from_toml(&c.to_toml(), "dye.toml").unwrap();
    assert_eq!(back.source.kind, "calibration");
    assert_eq!(back.calibration(), Some(r.calibration.clone()));
    assert_eq!(
        back.epsilon_std_error_l_per_mol_cm.map(|v| v.len()),
        Some(3)
    );
}

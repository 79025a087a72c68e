//! The streamed fit (wide files read in chunks of 2,048 lines, with the
//! chunk buffers recycled between the reader and the fitter) gives the same
//! outcomes, in the same order, as fitting the whole file read at once.
//! Four chunks and more, so every buffer is handed back and reused.
//!
//! Data are synthetic (two Gaussian bands, seeded noise); the comparison is
//! exact because both paths run the same solver on the same numbers
//! (common practice, no source: a streaming reader must not change results).

use unblend::fit::{FitOptions, Outcome, fit_file, fit_stream};
use unblend::input::spectra::{self, Opened, ReadOptions};
use unblend::reference::{Component, ReferenceSet};

const N_SPECTRA: usize = 30_000;

fn refs(w: &[f64]) -> ReferenceSet {
    let band = |centre: f64| -> Vec<f64> {
        w.iter()
            .map(|x| 20_000.0 * (-0.5 * ((x - centre) / 40.0).powi(2)).exp() + 100.0)
            .collect()
    };
    ReferenceSet {
        components: vec![
            Component::from_curve("a", w.to_vec(), band(450.0), "imported").unwrap(),
            Component::from_curve("b", w.to_vec(), band(600.0), "imported").unwrap(),
        ],
    }
}

fn csv(w: &[f64]) -> String {
    let mut s = String::from("sample");
    for x in w {
        s.push_str(&format!(",{x}"));
    }
    s.push('\n');
    let mut state: u64 = 42;
    let mut next = || {
        state = state
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        (state >> 11) as f64 / (1u64 << 53) as f64
    };
    for i in 0..N_SPECTRA {
        let (ca, cb) = (1e-5 * next(), 1e-5 * next());
        s.push_str(&format!("s{i}"));
        for x in w {
            let ea = 20_000.0 * (-0.5 * ((x - 450.0) / 40.0).powi(2)).exp() + 100.0;
            let eb = 20_000.0 * (-0.5 * ((x - 600.0) / 40.0).powi(2)).exp() + 100.0;
            let v = ea * ca + eb * cb + 0.002 * (next() - 0.5);
            s.push_str(&format!(",{v:.5}"));
        }
        // A bad row now and then: the failures keep their place too.
        if i % 9_999 == 17 {
            s.push_str(",extra");
        }
        s.push('\n');
    }
    s
}

#[test]
fn streamed_fit_equals_the_whole_file_fit_across_many_chunks() {
    let w: Vec<f64> = (0..24).map(|i| 400.0 + 12.5 * f64::from(i)).collect();
    let refs = refs(&w);
    let text = csv(&w);
    let options = FitOptions::default();
    let whole = spectra::read(text.as_bytes(), ReadOptions::default()).unwrap();
    let want = fit_file(&whole, &refs, &options).unwrap();
    let Opened::Wide(mut stream) = spectra::open(text.as_bytes(), ReadOptions::default()).unwrap()
    else {
        panic!("a wide file");
    };
    let mut got: Vec<Outcome> = Vec::new();
    let mut chunks = 0;
    fit_stream(&mut stream, &refs, &options, |outcomes| {
        chunks += 1;
        got.extend(outcomes);
        Ok::<(), ()>(())
    })
    .unwrap();
    assert!(chunks >= 4, "{chunks} chunks");
    assert_eq!(got.len(), N_SPECTRA);
    assert_eq!(got.len(), want.outcomes.len());
    let mut failed = 0;
    for (g, w) in got.iter().zip(&want.outcomes) {
        match (g, w) {
            (Outcome::Fitted(a), Outcome::Fitted(b)) => assert_eq!(a, b),
            (Outcome::Failed(a), Outcome::Failed(b)) => {
                assert_eq!(a.sample, b.sample);
                failed += 1;
            }
            _ => panic!("outcomes differ"),
        }
    }
    assert_eq!(failed, 3);
}

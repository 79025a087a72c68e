use super::*;
use crate::input::plate::Reading;

fn plates(text: &str) -> Vec<(String, Result<PlateSpectra>)> {
    let mut s = PlateStream::open(text.as_bytes(), "run", &Reading::default()).unwrap();
    let mut out = Vec::new();
    while let Some(p) = s.next_plate().unwrap() {
        out.push((p.name.clone(), p.parse(&Reading::default())));
    }
    out
}

#[test]
fn unnamed_grid_plates_split_where_a_wavelength_repeats() {
    let block = |w: u32, v: f64| format!("wavelength_nm={w}\n,1,2\nA,{v},{v}\n\n");
    let text = format!(
        "export\n{}{}{}{}",
        block(400, 0.1),
        block(410, 0.2),
        block(400, 0.3),
        block(410, 0.4)
    );
    let p = plates(&text);
    assert_eq!(p.len(), 2);
    assert_eq!(p[0].0, "run");
    assert_eq!(p[1].0, "run-2");
    let second = p[1].1.as_ref().unwrap();
    assert_eq!(second.row(0), &[0.3, 0.4]);
}

#[test]
fn named_grid_plates_and_a_plate_that_comes_back() {
    let text = "plate=P1 wavelength_nm=400\n,1\nA,0.1\nplate=P2 wavelength_nm=400\n,1\nA,0.2\nplate=P1 wavelength_nm=410\n,1\nA,0.3\n";
    let p = plates(text);
    assert_eq!(p.len(), 3);
    assert_eq!(p[1].0, "P2");
    let e = p[2].1.as_ref().unwrap_err().to_string();
    assert!(e.starts_with("line 7: plate 'P1' appears again"), "{e}");
}

#[test]
fn wide_rows_split_by_plate_prefix_with_file_line_numbers() {
    let text = "sample,400,410\nP1:A1,0.1,0.2\nP1:A2,0.1,0.2\nP2:A1,0.3,x\nP2:A2,0.3,0.4\n";
    let p = plates(text);
    assert_eq!(p.len(), 2);
    let p2 = p[1].1.as_ref().unwrap();
    assert_eq!(p2.name, "P2");
    assert_eq!(p2.wells.len(), 1);
    assert_eq!(
        p2.failures[0].error.to_string(),
        "line 4, column 3 ('x'): expected an absorbance (a number) or an overflow marker (>N, inf; if your instrument prints 'x' for a reading above its range, name it with --overflow-marker)"
    );
}

#[test]
fn bare_wells_repeat_to_start_the_next_plate() {
    let text = "sample,400,410\nA1,0.1,0.2\nA2,0.1,0.2\nA1,0.3,0.4\nlot-1,1,1\n";
    let p = plates(text);
    assert_eq!(p.len(), 2);
    let p2 = p[1].1.as_ref().unwrap();
    assert_eq!(p2.name, "run-2");
    assert_eq!(p2.wells.len(), 1);
    assert!(p2.failures[0].error.to_string().contains("expected a well"));
}

#[test]
fn long_files_are_grouped_by_plate() {
    let text = "sample,wavelength_nm,absorbance\nP1:A1,400,0.1\nP2:B3,400,0.2\nP1:A1,410,0.3\nP2:B3,410,0.4\n";
    let p = plates(text);
    assert_eq!(p.len(), 2);
    let p2 = p[1].1.as_ref().unwrap();
    assert_eq!(p2.wells[0].to_string(), "B3");
    assert_eq!(p2.row(0), &[0.2, 0.4]);
}

#[test]
fn arbitrary_text_never_panics() {
    // Seeded random texts from the layouts' own pieces: every outcome
    // must be a value or an error, never a panic.
    const PIECES: [&str; 22] = [
        "wavelength_nm=",
        "plate=",
        "400",
        "401.5",
        "-1",
        "1e9",
        ",",
        ";",
        "\t",
        "\n",
        "\r\n",
        "A",
        "P",
        "Q",
        "OVER",
        ">4",
        "NaN",
        "\"",
        "sample",
        "wavelength_nm",
        "absorbance",
        ":A1",
    ];
    let mut x: u64 = 0x5eed;
    for _ in 0..3000 {
        let mut text = String::new();
        x = x.wrapping_mul(6364136223846793005).wrapping_add(1);
        let len = (x >> 58) as usize + 1;
        for _ in 0..len * 4 {
            x = x
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            text.push_str(PIECES[(x >> 33) as usize % PIECES.len()]);
        }
        if let Ok(mut s) = PlateStream::open_with(text.as_bytes(), "r", &Reading::default(), 7) {
            while let Ok(Some(p)) = s.next_plate() {
                let _ = p.parse(&Reading::default());
            }
        }
        let _ = crate::input::platemap::read(text.as_bytes());
    }
    // A valid plate with a few bytes changed.
    let base = b"plate=P wavelength_nm=400\n,1,2,3\nA,0.1,0.2,0.3\nB,0.4,OVER,0.6\n\nwavelength_nm=410\n,1,2,3\nA,0.1,0.2,0.3\nB,0.4,0.5,0.6\n";
    let alphabet = b"0123456789.,;-=\n\rABPQ\" >e";
    for _ in 0..3000 {
        let mut text = base.to_vec();
        for _ in 0..4 {
            x = x
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            let at = (x >> 33) as usize % text.len();
            text[at] = alphabet[(x >> 20) as usize % alphabet.len()];
        }
        if let Ok(mut s) = PlateStream::open_with(&text[..], "r", &Reading::default(), 5) {
            while let Ok(Some(p)) = s.next_plate() {
                let _ = p.parse(&Reading::default());
            }
        }
    }
}

#[test]
fn small_chunks_give_the_same_plates() {
    struct Trickle<'a>(&'a [u8]);
    impl Read for Trickle<'_> {
        fn read(&mut self, out: &mut [u8]) -> std::io::Result<usize> {
            let k = self.0.len().min(7).min(out.len());
            out[..k].copy_from_slice(&self.0[..k]);
            self.0 = &self.0[k..];
            Ok(k)
        }
    }
    let text = "plate=P1 wavelength_nm=400\n,1,2\nA,0.1,0.2\nplate=P1 wavelength_nm=410\n,1,2\nA,0.3,0.4\nplate=P2 wavelength_nm=400\n,1,2\nA,0.5,0.6";
    let mut s =
        PlateStream::open_with(Trickle(text.as_bytes()), "x", &Reading::default(), 5).unwrap();
    let mut names = Vec::new();
    while let Some(p) = s.next_plate().unwrap() {
        let name = p.name.clone();
        let spectra = p.parse(&Reading::default()).unwrap();
        names.push((name, spectra.absorbance_au));
    }
    assert_eq!(names.len(), 2);
    assert_eq!(names[0].1, vec![0.1, 0.3, 0.2, 0.4]);
    assert_eq!(names[1].1, vec![0.5, 0.6]);
}

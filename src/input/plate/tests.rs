use super::*;

fn parse(text: &str) -> Result<PlateSpectra> {
    parse_grid(text.as_bytes(), 1, "p", &Reading::default())
}

#[test]
fn plain_headings_name_the_wavelength_in_each_form() {
    for line in [
        "450 nm",
        "450nm,,,",
        "Wavelength: 450 nm",
        "wavelength = 450",
        "λ = 450 nm",
        "Lambda 450",
    ] {
        assert_eq!(plain_heading(line.as_bytes()), Some(450.0), "{line}");
        assert!(heading(line.as_bytes()).is_some(), "{line}");
    }
    for line in [
        "450",
        ",1,2,3",
        "A,0.1,0.2",
        "Slit: 2 nm",
        "sample,450 nm,460 nm",
    ] {
        assert_eq!(plain_heading(line.as_bytes()), None, "{line}");
    }
    let text = "Wavelength: 400 nm\n,1,2\nA,0.1,0.2\n\n410nm\n,1,2\nA,0.3,0.4\n";
    let p = parse(text).unwrap();
    assert_eq!(p.grid.as_ref().unwrap().wavelengths_nm(), [400.0, 410.0]);
    assert_eq!(p.row(1), &[0.2, 0.4]);
}

#[test]
fn well_ids_are_read_and_printed() {
    assert_eq!(Well::parse("A1"), Some(Well { row: 0, col: 0 }));
    assert_eq!(Well::parse(" b012 "), Some(Well { row: 1, col: 11 }));
    assert_eq!(Well::parse("P24").unwrap().to_string(), "P24");
    assert_eq!(Well::parse("Q1"), None);
    assert_eq!(Well::parse("A25"), None);
    assert_eq!(Well::parse("A0"), None);
    assert_eq!(Well::parse("lot-1"), None);
    assert_eq!(Well::parse(""), None);
}

#[test]
fn headings_are_found_with_spaces_commas_and_quotes() {
    let h = heading(b"plate=P1 wavelength_nm=450").unwrap();
    assert_eq!(h.plate.as_deref(), Some("P1"));
    assert!((h.wavelength_nm.unwrap() - 450.0).abs() < 1e-12);
    let h = heading(b"plate = \"run 7\",wavelength_nm = 450.5,,,").unwrap();
    assert_eq!(h.plate.as_deref(), Some("run 7"));
    assert!((h.wavelength_nm.unwrap() - 450.5).abs() < 1e-12);
    assert!(heading(b"Gain=100").is_none());
    assert!(heading(b"A,0.1,0.2").is_none());
    assert_eq!(
        heading(b"wavelength_nm=abc").unwrap().wavelength_nm,
        Err("abc".to_string())
    );
}

#[test]
fn two_blocks_make_a_plate_with_metadata_and_trailing_cells_skipped() {
    let text = "Reader export\nOperator: X\n\nwavelength_nm=500,,,\n,1,2,,\nA,0.5,0.6,,\nB,0.7,0.8\n\nTemperature: 25 C\nwavelength_nm=400\n,1,2\nA,0.1,0.2\nB,0.3,0.4\nend of read\n";
    let p = parse(text).unwrap();
    assert_eq!(p.grid.as_ref().unwrap().wavelengths_nm(), &[400.0, 500.0]);
    assert_eq!(p.wells.len(), 4);
    assert_eq!(p.wells[1].to_string(), "A2");
    assert_eq!(p.row(1), &[0.2, 0.6]);
    assert_eq!(p.row(3), &[0.4, 0.8]);
    assert_eq!(p.format, PlateFormat::Wells96);
    assert!(p.failures.is_empty());
}

#[test]
fn generic_and_user_named_overflow_markers_become_saturated_points() {
    let text = "wavelength_nm=400\n,1,2,3,4\nA,Too High,>4,inf,0.5\nwavelength_nm=410\n,1,2,3,4\nA,1,1,1,1\n";
    let reading = Reading {
        quantity: Quantity::Absorbance,
        overflow_markers: fields::OverflowMarkers::new(&["too high"]),
    };
    let p = parse_grid(text.as_bytes(), 1, "p", &reading).unwrap();
    assert_eq!(p.wells.len(), 4);
    for i in 0..3 {
        assert!(p.row(i)[0].is_infinite(), "well {i}");
        assert!((p.row(i)[1] - 1.0).abs() < 1e-12);
    }
    // Without the user's word it is an error naming the cell and the option.
    let p = parse(text).unwrap();
    let e = p.failures[0].error.to_string();
    assert!(
        e.starts_with("line 3, column 2 ('Too High')") && e.contains("--overflow-marker"),
        "{e}"
    );
}

#[test]
fn nan_and_garbled_cells_fail_only_their_well() {
    let text = "wavelength_nm=400\n,1,2,3\nA,NaN,0.1a,0.2\n";
    let p = parse(text).unwrap();
    assert_eq!(p.wells.len(), 1);
    assert_eq!(p.failures.len(), 2);
    let e = p.failures[1].error.to_string();
    assert!(e.starts_with("line 3, column 3 ('0.1a')"), "{e}");
    assert!(e.contains("overflow marker"), "{e}");
}

#[test]
fn semicolon_grid_with_decimal_comma_is_read() {
    let text = "wavelength_nm=400\n;1;2\nA;0,25;0,5\n";
    let p = parse(text).unwrap();
    assert_eq!(p.row(0), &[0.25]);
    assert_eq!(p.row(1), &[0.5]);
}

#[test]
fn a_well_missing_from_one_block_fails_with_the_line() {
    let text = "wavelength_nm=400\n,1,2\nA,0.1,0.2\nwavelength_nm=410\n,1,2\nA,0.1\n";
    let p = parse(text).unwrap();
    assert_eq!(p.wells.len(), 1);
    assert_eq!(p.failures[0].label, "A2");
    assert!(
        p.failures[0].error.to_string().contains("line 4"),
        "{}",
        p.failures[0].error
    );
}

#[test]
fn duplicate_wavelength_and_bad_column_numbers_are_errors() {
    let e = parse("wavelength_nm=400\n,1\nA,1\nwavelength_nm=400\n,1\nA,1\n").unwrap_err();
    assert!(e.to_string().contains("appears twice"), "{e}");
    let e = parse("wavelength_nm=400\n,1,x\nA,1,2\n").unwrap_err();
    assert_eq!(
        e.to_string(),
        "line 2, column 3 ('x'): expected a column number 1–24 (the line after the heading on line 1 lists the columns)"
    );
    let e = parse("wavelength_nm=4OO\n,1\nA,1\n").unwrap_err();
    assert!(e.to_string().starts_with("line 1 ('4OO')"), "{e}");
}

#[test]
fn plain_decimals_parse_exactly_as_the_standard_library_does() {
    // Rust's str::parse::<f64> is correctly rounded: the reference.
    let mut x: u64 = 12345;
    for _ in 0..20_000 {
        x = x
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        let int = (x >> 40) % 100_000;
        let frac_digits = ((x >> 20) % 9) as usize;
        let frac = (x >> 8) % 10u64.pow(frac_digits as u32).max(1);
        let text = if frac_digits == 0 {
            format!("{int}")
        } else {
            format!("{int}.{frac:0frac_digits$}")
        };
        for t in [text.clone(), format!("-{text}")] {
            let want: f64 = t.parse().unwrap();
            assert_eq!(
                plain_decimal(t.as_bytes()).map(f64::to_bits),
                Some(want.to_bits()),
                "{t}"
            );
        }
    }
    for t in [
        "",
        "-",
        ".",
        "1e3",
        "1.2.3",
        " 1",
        "0,5",
        "1234567890123456",
    ] {
        assert_eq!(plain_decimal(t.as_bytes()), None, "{t}");
    }
}

#[test]
fn fast_rows_match_the_general_path_or_step_aside() {
    let mut out = [0.0; MAX_COLUMNS + 1];
    assert_eq!(
        fast_row(b"B,0.5,-0.25,3,,", b',', &mut out),
        Some((b'B', 3))
    );
    assert_eq!(&out[..3], &[0.5, -0.25, 3.0]);
    for line in [
        &b"B,0.5,OVER"[..],
        b"B, 0.5",
        b"B,0.5,,0.7",
        b"B,\"0.5\"",
        b"AB,0.5",
        b"B;0,5",
        b"B,",
        b"B,1e-3",
        b"B,1234567890123456789012345",
    ] {
        assert_eq!(
            fast_row(line, b',', &mut out),
            None,
            "{}",
            String::from_utf8_lossy(line)
        );
    }
    // Same plate either way: a file the fast path reads and one it does not.
    let fast = parse("wavelength_nm=400\n,1,2\nA,0.1,0.2\nB,0.3,0.4\n").unwrap();
    let slow = parse("wavelength_nm=400\n,1,2\nA, 0.1,0.2\nB,0.3 ,0.4\n").unwrap();
    assert_eq!(fast.absorbance_au, slow.absorbance_au);
    assert_eq!(fast.wells, slow.wells);
}

#[test]
fn a_384_well_grid_is_recognised() {
    let mut text = String::from("wavelength_nm=400\n");
    text.push_str(&(1..=24).map(|c| format!(",{c}")).collect::<String>());
    text.push('\n');
    for r in 0..16u8 {
        text.push((b'A' + r) as char);
        for _ in 0..24 {
            text.push_str(",0.1");
        }
        text.push('\n');
    }
    let p = parse(&text).unwrap();
    assert_eq!(p.wells.len(), 384);
    assert_eq!(p.format, PlateFormat::Wells384);
    assert_eq!(p.wells[383].to_string(), "P24");
}

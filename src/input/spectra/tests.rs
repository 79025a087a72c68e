use super::wide_row::*;
use super::*;

fn read_str(s: &str) -> Result<SpectraFile> {
    read(s.as_bytes(), ReadOptions::default())
}

#[test]
fn wide_layout_is_detected_and_read() {
    let f = read_str("sample,400,500,600\ns1,0.1,0.2,0.3\ns2,0.4,0.5,0.6\n").unwrap();
    assert_eq!(f.layout, Layout::Wide);
    assert_eq!(f.blocks.len(), 1);
    assert_eq!(f.blocks[0].ids, vec!["s1", "s2"]);
    assert_eq!(f.blocks[0].row(1), &[0.4, 0.5, 0.6]);
}

#[test]
fn long_layout_is_detected_and_grouped() {
    let f = read_str(
        "sample,wavelength_nm,absorbance\ns1,400,0.1\ns1,500,0.2\ns2,400,0.3\ns2,500,0.4\n",
    )
    .unwrap();
    assert_eq!(f.layout, Layout::Long);
    assert_eq!(f.blocks.len(), 1);
    assert_eq!(f.blocks[0].row(1), &[0.3, 0.4]);
}

#[test]
fn semicolon_decimal_comma_bom_crlf_are_read() {
    let f = read_str("\u{feff}sample;400;500\r\ns1;0,1;0,25\r\n").unwrap();
    assert_eq!(f.delimiter, Delimiter::Semicolon);
    assert_eq!(f.blocks[0].row(0), &[0.1, 0.25]);
}

#[test]
fn descending_wavelengths_are_reversed_with_their_values() {
    let f = read_str("sample,600,500,400\ns1,0.3,0.2,0.1\n").unwrap();
    assert_eq!(f.blocks[0].grid.wavelengths_nm(), &[400.0, 500.0, 600.0]);
    assert_eq!(f.blocks[0].row(0), &[0.1, 0.2, 0.3]);
}

#[test]
fn bad_cell_fails_only_its_row() {
    let f = read_str("sample,400,500\ns1,0.1,abc\ns2,0.1,0.2\n").unwrap();
    assert_eq!(f.failures.len(), 1);
    assert_eq!(f.failures[0].sample, "s1");
    assert_eq!(
        f.failures[0].error.to_string(),
        "line 2, column 3 ('abc'): expected an absorbance (a number)"
    );
    assert_eq!(f.blocks[0].ids, vec!["s2"]);
}

#[test]
fn short_row_is_reported() {
    // A short row's last readings are missing (spreadsheets drop
    // trailing empty cells): one of two is more than 10 %.
    let f = read_str("sample,400,500\ns1,0.1\n").unwrap();
    assert!(
        f.failures[0]
            .error
            .to_string()
            .contains("line 2: column 3: 1 of 2 readings")
    );
}

#[test]
fn empty_and_header_only_are_errors() {
    assert!(matches!(read_str(""), Err(Error::Empty)));
    assert!(matches!(read_str("\n\n"), Err(Error::Empty)));
    let e = read_str("sample,400,500\n").unwrap_err();
    assert!(e.to_string().contains("only line"), "{e}");
}

#[test]
fn duplicate_header_wavelength_is_rejected() {
    let e = read_str("sample,400,400\ns,1,2\n").unwrap_err();
    assert!(e.to_string().contains("appears twice"), "{e}");
}

#[test]
fn transmittance_is_converted_to_absorbance() {
    let opts = ReadOptions {
        quantity: Some(Quantity::TransmittancePercent),
        ..Default::default()
    };
    let f = read("sample,400\ns,10\n".as_bytes(), opts.clone()).unwrap();
    assert!((f.blocks[0].row(0)[0] - 1.0).abs() < 1e-12);
    let f = read("sample,400\ns,0\n".as_bytes(), opts).unwrap();
    assert!(f.failures[0].error.to_string().contains("above 0"));
}

#[test]
fn eight_digit_swar_matches_scalar() {
    for text in [
        "12345678", "1234,x  ", "0000000a", "9;......", "x1234567", "00012345", "98765432",
    ] {
        let (count, value) = eight_digits(text.as_bytes());
        let digits: String = text
            .chars()
            .take_while(|c| c.is_ascii_digit())
            .take(8)
            .collect();
        assert_eq!(count, digits.len(), "{text}");
        assert_eq!(value, digits.parse::<u64>().unwrap_or(0), "{text}");
    }
}

#[test]
fn fast_path_is_correctly_rounded_for_many_decimals() {
    // Compared bit for bit with the standard library's correctly rounded
    // parser, over digit counts 1–20 on both sides of the point.
    let mut state: u64 = 7;
    let mut header = String::from("sample");
    let mut row = String::from("s");
    let mut texts = Vec::new();
    for k in 0..400 {
        state = state
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        let int_digits = (state >> 60) as usize % 4;
        let frac_digits = (state >> 50) as usize % 21;
        let mut t = String::new();
        if state & 1 == 1 {
            t.push('-');
        }
        for d in 0..int_digits.max(1) {
            t.push(char::from(b'0' + ((state >> (d * 3)) % 10) as u8));
        }
        if frac_digits > 0 {
            t.push('.');
            for d in 0..frac_digits {
                t.push(char::from(b'0' + ((state >> ((d * 5) % 60)) % 10) as u8));
            }
        }
        header.push_str(&format!(",{}", 300 + k));
        row.push_str(&format!(",{t}"));
        texts.push(t);
    }
    let f = read_str(&format!("{header}\n{row}\n")).unwrap();
    for (v, t) in f.blocks[0].row(0).iter().zip(&texts) {
        assert_eq!(v.to_bits(), t.parse::<f64>().unwrap().to_bits(), "{t}");
    }
}

#[test]
fn seventeen_digit_numbers_are_rounded_once() {
    // 17 significant digits (as a shortest round-trip printer may write)
    // exceed 2⁵³: converting the digits to f64 and then dividing rounds
    // twice, off by one ulp for these (found by comparing the two in
    // Python); they must take the correctly rounded general path.
    let texts = [
        "0.92030920993190389",
        "0.78057710105581731",
        "-0.64708321257442331",
    ];
    let f = read_str(&format!("sample,400,500,600\ns,{}\n", texts.join(","))).unwrap();
    for (v, t) in f.blocks[0].row(0).iter().zip(texts) {
        assert_eq!(v.to_bits(), t.parse::<f64>().unwrap().to_bits(), "{t}");
    }
}

#[test]
fn fast_and_general_number_paths_agree() {
    // Plain decimals take the fast path; the others fall back to the
    // general parser (fast-float2); both must give the same values.
    let f =
        read_str("sample,400,500,600,700\ns1,0.125,-0.5,+.25,3.\ns2,1e-3, 0.5 ,\"0.75\",-2E-1\n")
            .unwrap();
    assert_eq!(f.blocks[0].row(0), &[0.125, -0.5, 0.25, 3.0]);
    assert_eq!(f.blocks[0].row(1), &[1e-3, 0.5, 0.75, -0.2]);
    let digits = "0.1234567890123456789";
    let g = read_str(&format!("sample,400\ns,{digits}\n")).unwrap();
    assert_eq!(
        g.blocks[0].row(0)[0].to_bits(),
        digits.parse::<f64>().unwrap().to_bits()
    );
}

#[test]
fn trailing_delimiters_and_extra_fields_are_told_apart() {
    let f = read_str("sample,400,500,,\ns1,0.1,0.2,,\ns2,0.1,0.2,0.3\n").unwrap();
    assert_eq!(f.blocks[0].ids, vec!["s1"]);
    assert!(
        f.failures[0]
            .error
            .to_string()
            .contains("4 fields but the header has 3")
    );
}

#[test]
fn long_layout_duplicate_wavelength_fails_the_sample() {
    let f =
        read_str("sample,wavelength_nm,absorbance\ns1,400,0.1\ns1,400,0.2\ns2,400,0.3\n").unwrap();
    assert_eq!(f.failures.len(), 1);
    assert_eq!(f.failures[0].sample, "s1");
    assert_eq!(f.blocks[0].ids, vec!["s2"]);
}

//! Small text helpers shared by the terminal summaries: significant figures
//! and left-aligned tables.

/// Four significant figures without an exponent for everyday magnitudes.
pub fn sig(v: f64) -> String {
    if v.abs() < f64::MIN_POSITIVE || (1e-3..1e6).contains(&v.abs()) {
        let digits = (3 - v.abs().log10().floor() as i32).clamp(0, 6) as usize;
        format!("{v:.digits$}")
    } else {
        format!("{v:.3e}")
    }
}

/// Format rows as a left-aligned table (first row is the header, then a
/// rule).
pub fn format_aligned(rows: &[Vec<String>]) -> String {
    let ncol = rows.iter().map(Vec::len).max().unwrap_or(0);
    let mut width = vec![0; ncol];
    for r in rows {
        for (i, c) in r.iter().enumerate() {
            width[i] = width[i].max(c.chars().count());
        }
    }
    let mut out = String::new();
    for (k, r) in rows.iter().enumerate() {
        let mut s = String::new();
        for (i, c) in r.iter().enumerate() {
            s.push_str(c);
            s.push_str(&" ".repeat(width[i] - c.chars().count() + 2));
        }
        out.push_str(s.trim_end());
        out.push('\n');
        if k == 0 {
            let rule: Vec<String> = width.iter().map(|w| "-".repeat(*w)).collect();
            out.push_str(&rule.join("  "));
            out.push('\n');
        }
    }
    out
}

/// Write a header and rows as a table of numbers: the first column
/// left-aligned, the others right-aligned, two spaces apart; `rule` adds a
/// line of dashes under the header.
pub fn write_numbers_table(
    w: &mut (impl std::io::Write + ?Sized),
    header: &[String],
    rows: &[Vec<String>],
    rule: bool,
) -> std::io::Result<()> {
    let all = || std::iter::once(header).chain(rows.iter().map(Vec::as_slice));
    let mut width = vec![0usize; header.len()];
    for r in all() {
        for (i, cell) in r.iter().enumerate() {
            width[i] = width[i].max(cell.chars().count());
        }
    }
    for (k, r) in all().enumerate() {
        let cells: Vec<String> = r
            .iter()
            .enumerate()
            .map(|(i, c)| {
                let pad = " ".repeat(width[i] - c.chars().count());
                if i == 0 {
                    format!("{c}{pad}")
                } else {
                    format!("{pad}{c}")
                }
            })
            .collect();
        writeln!(w, "{}", cells.join("  ").trim_end())?;
        if rule && k == 0 {
            let dashes: Vec<String> = width.iter().map(|n| "-".repeat(*n)).collect();
            writeln!(w, "{}", dashes.join("  "))?;
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sig_keeps_four_significant_figures() {
        // Four significant figures: common practice for displayed results, no source.
        assert_eq!(sig(1234.5678), "1235");
        assert_eq!(sig(0.012345), "0.01235");
        assert_eq!(sig(1.5e-7), "1.500e-7");
    }

    #[test]
    fn aligned_table_pads_columns_and_rules_the_header() {
        let rows = vec![
            vec!["a".to_string(), "long".into()],
            vec!["wider".to_string(), "x".into()],
        ];
        assert_eq!(
            format_aligned(&rows),
            "a      long\n-----  ----\nwider  x\n"
        );
    }
}

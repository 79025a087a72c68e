//! Input stage: the ordinates of a JCAMP-DX `(X++(Y..Y))` table.
//!
//! In: the data lines of an `##XYDATA=` record. Out: the ordinates in file
//! units, each with its line, `None` for a missing one (`?`). Each line's
//! first number is its abscissa and is skipped (the caller computes the
//! abscissae from FIRSTX, LASTX and NPOINTS). Numbers are AFFN/PAC or the
//! ASDF compressed forms (SQZ, DIF, DUP); when a line ends in DIF form the
//! next line's first ordinate repeats it as a check (McDonald & Wilks,
//! Appl. Spectrosc. 42:151, 1988; see [`super::jcamp`]).

use crate::error::{Error, Result};

/// One token of a data line.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Token {
    /// An absolute value (AFFN, PAC or SQZ).
    Abs(f64),
    /// A difference from the previous ordinate (DIF).
    Dif(f64),
    /// The previous token occurs this many times in all (DUP).
    Dup(u32),
    /// A missing ordinate (`?`).
    Missing,
}

/// The ordinates of the data lines, with their line numbers.
pub fn ordinates(lines: &[(usize, String)]) -> Result<Vec<(usize, Option<f64>)>> {
    let mut out: Vec<(usize, Option<f64>)> = Vec::new();
    let mut last: Option<f64> = None;
    let mut ended_in_dif = false;
    for (line_no, line) in lines {
        let tokens = tokens(*line_no, line)?;
        let Some((first, rest)) = tokens.split_first() else {
            continue;
        };
        if !matches!(first, Token::Abs(_)) {
            return Err(Error::parse(
                *line_no,
                1,
                line.as_bytes(),
                "an abscissa (an absolute number) at the start of the line",
            ));
        }
        let mut ys = expand(*line_no, rest, last)?;
        if ended_in_dif && !ys.is_empty() {
            check(*line_no, ys[0].1, last)?;
            ys.remove(0);
        }
        ended_in_dif = rest
            .iter()
            .rev()
            .find(|t| !matches!(t, Token::Dup(_)))
            .is_some_and(|t| matches!(t, Token::Dif(_)));
        if let Some(&(_, y)) = ys.last() {
            last = y;
        }
        out.extend(ys);
    }
    Ok(out)
}

/// Compare a line's Y-check value with the previous line's last ordinate.
fn check(line_no: usize, y: Option<f64>, last: Option<f64>) -> Result<()> {
    match (y, last) {
        (Some(y), Some(l)) if (y - l).abs() <= 1e-9 * l.abs().max(1.0) => Ok(()),
        _ => Err(Error::structure(
            line_no,
            format!(
                "Y-check failed: the line starts with ordinate {}, but the previous line ended with {} (a line may be missing or damaged)",
                y.map_or("?".into(), |v| v.to_string()),
                last.map_or("?".into(), |v| v.to_string())
            ),
        )),
    }
}

/// Apply DIF and DUP to a line's tokens after the abscissa.
fn expand(
    line_no: usize,
    tokens: &[Token],
    mut last: Option<f64>,
) -> Result<Vec<(usize, Option<f64>)>> {
    let mut out = Vec::with_capacity(tokens.len());
    let mut previous: Option<Token> = None;
    for &t in tokens {
        let step = match t {
            Token::Dup(n) => {
                let Some(p) = previous else {
                    return Err(Error::structure(
                        line_no,
                        "a DUP count with no value before it",
                    ));
                };
                for _ in 1..n {
                    last = apply(line_no, p, last)?;
                    out.push((line_no, last));
                }
                continue;
            }
            t => t,
        };
        last = apply(line_no, step, last)?;
        out.push((line_no, last));
        previous = Some(step);
    }
    Ok(out)
}

fn apply(line_no: usize, t: Token, last: Option<f64>) -> Result<Option<f64>> {
    match t {
        Token::Abs(v) => Ok(Some(v)),
        Token::Missing => Ok(None),
        Token::Dif(d) => match last {
            Some(l) => Ok(Some(l + d)),
            None => Err(Error::structure(
                line_no,
                "a DIF value with no ordinate before it to add to",
            )),
        },
        Token::Dup(_) => Ok(last),
    }
}

/// The digit and sign a compressed character stands for, and its form.
fn compressed(c: u8) -> Option<(u8, bool, Form)> {
    match c {
        b'@' => Some((0, false, Form::Sqz)),
        b'A'..=b'I' => Some((c - b'A' + 1, false, Form::Sqz)),
        b'a'..=b'i' => Some((c - b'a' + 1, true, Form::Sqz)),
        b'%' => Some((0, false, Form::Dif)),
        b'J'..=b'R' => Some((c - b'J' + 1, false, Form::Dif)),
        b'j'..=b'r' => Some((c - b'j' + 1, true, Form::Dif)),
        b'S'..=b'Z' => Some((c - b'S' + 1, false, Form::Dup)),
        b's' => Some((9, false, Form::Dup)),
        _ => None,
    }
}

#[derive(Debug, Clone, Copy, PartialEq)]
enum Form {
    Sqz,
    Dif,
    Dup,
}

/// Split a data line into tokens.
fn tokens(line_no: usize, line: &str) -> Result<Vec<Token>> {
    let b = line.as_bytes();
    let mut out = Vec::new();
    let mut i = 0;
    while i < b.len() {
        let c = b[i];
        if matches!(c, b' ' | b',' | b';' | b'\t') {
            i += 1;
        } else if c == b'?' {
            out.push(Token::Missing);
            i += 1;
        } else if c.is_ascii_digit() || matches!(c, b'+' | b'-' | b'.') {
            let end = affn_end(b, i);
            let v: f64 = line[i..end].parse().map_err(|_| {
                Error::parse(
                    line_no,
                    i + 1,
                    &b[i..end],
                    "a number (AFFN, or SQZ/DIF/DUP characters)",
                )
            })?;
            out.push(Token::Abs(v));
            i = end;
        } else if let Some((digit, negative, form)) = compressed(c) {
            let end = digits_end(b, i + 1);
            let text = format!("{digit}{}", &line[i + 1..end]);
            let v: f64 = text
                .parse()
                .map_err(|_| Error::parse(line_no, i + 1, &b[i..end], "a compressed number"))?;
            let v = if negative { -v } else { v };
            out.push(match form {
                Form::Sqz => Token::Abs(v),
                Form::Dif => Token::Dif(v),
                Form::Dup => Token::Dup(v as u32),
            });
            i = end;
        } else {
            return Err(Error::parse(
                line_no,
                i + 1,
                &b[i..i + 1],
                "a number, a SQZ/DIF/DUP character or ?",
            ));
        }
    }
    Ok(out)
}

/// End of the digits (and one decimal point) from `i`.
fn digits_end(b: &[u8], mut i: usize) -> usize {
    let mut dot = false;
    while i < b.len() && (b[i].is_ascii_digit() || (b[i] == b'.' && !dot)) {
        dot |= b[i] == b'.';
        i += 1;
    }
    i
}

/// End of an AFFN number from `i`: sign, digits, decimal point, and an
/// exponent `E±dd` only when a sign or digit follows the `E` (otherwise the
/// `E` is a SQZ character).
fn affn_end(b: &[u8], i: usize) -> usize {
    let start = if matches!(b[i], b'+' | b'-') {
        i + 1
    } else {
        i
    };
    let mut end = digits_end(b, start);
    if end < b.len() && matches!(b[end], b'E' | b'e') {
        let mut k = end + 1;
        if k < b.len() && matches!(b[k], b'+' | b'-') {
            k += 1;
            if k < b.len() && b[k].is_ascii_digit() {
                end = digits_end(b, k);
            }
        }
    }
    end
}

#[cfg(test)]
mod tests {
    use super::*;

    fn ys(lines: &[&str]) -> Result<Vec<Option<f64>>> {
        let lines: Vec<(usize, String)> = lines
            .iter()
            .enumerate()
            .map(|(i, l)| (i + 1, l.to_string()))
            .collect();
        Ok(ordinates(&lines)?.into_iter().map(|p| p.1).collect())
    }

    #[test]
    fn affn_pac_and_sqz_read_the_same_values() {
        let want: Vec<Option<f64>> = [10.0, 12.0, -3.0, 40.0].map(Some).to_vec();
        assert_eq!(ys(&["400 10 12 -3 40"]).unwrap(), want);
        assert_eq!(ys(&["400+10+12-3+40"]).unwrap(), want);
        assert_eq!(ys(&["400A0A2c@0"]).unwrap()[..3], want[..3]);
        assert_eq!(ys(&["400A0A2cD0"]).unwrap(), want);
    }

    #[test]
    fn dif_and_dup_expand_and_the_y_check_is_dropped() {
        // A0 = 10, K = +2 twice, T repeats that +2 (16), % = +0 and T
        // repeats it; the next line repeats 16 as its Y-check, then J = +1.
        let v = ys(&["400A0KKT%T", "406A6J"]).unwrap();
        let want: Vec<Option<f64>> = [10.0, 12.0, 14.0, 16.0, 16.0, 16.0, 17.0]
            .map(Some)
            .to_vec();
        assert_eq!(v, want);
    }

    #[test]
    fn a_wrong_y_check_is_an_error_naming_the_line() {
        let e = ys(&["400A0KK", "402A5J"]).unwrap_err().to_string();
        assert!(e.contains("line 2") && e.contains("Y-check"), "{e}");
    }

    #[test]
    fn exponents_are_read_in_affn_and_e_alone_is_sqz() {
        assert_eq!(ys(&["400 1.5E+2"]).unwrap(), vec![Some(150.0)]);
        assert_eq!(ys(&["400 E"]).unwrap(), vec![Some(5.0)]);
        assert_eq!(ys(&["400 ? 3"]).unwrap(), vec![None, Some(3.0)]);
    }
}

//! Calendar dates without a time-zone database: today's date in UTC.

use std::time::{SystemTime, UNIX_EPOCH};

/// Today's date (UTC) as `YYYY-MM-DD`.
pub fn today_utc() -> String {
    let secs = SystemTime::now()
        .duration_since(UNIX_EPOCH)
        .map(|d| d.as_secs())
        .unwrap_or(0);
    civil_from_days((secs / 86_400) as i64)
}

/// Convert days since 1970-01-01 to `YYYY-MM-DD` (proleptic Gregorian;
/// H. Hinnant's `civil_from_days` algorithm).
pub fn civil_from_days(days: i64) -> String {
    let z = days + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z.rem_euclid(146_097);
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let y = yoe + era * 400;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = doy - (153 * mp + 2) / 5 + 1;
    let m = if mp < 10 { mp + 3 } else { mp - 9 };
    let y = if m <= 2 { y + 1 } else { y };
    format!("{y:04}-{m:02}-{d:02}")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn known_dates_convert() {
        // 1970-01-01 is day 0; 2000-03-01 is day 11017 (common reference values).
        assert_eq!(civil_from_days(0), "1970-01-01");
        assert_eq!(civil_from_days(11_017), "2000-03-01");
        assert_eq!(civil_from_days(20_788), "2026-12-01");
    }
}

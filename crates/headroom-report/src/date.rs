//! Calendar dates for the report's date line: from Unix seconds (e.g. `SOURCE_DATE_EPOCH`) or
//! checked from text, always `YYYY-MM-DD` (ISO 8601, proleptic Gregorian, UTC).

/// The UTC calendar date of `unix_seconds` as `YYYY-MM-DD`.
pub fn date_from_unix_seconds(unix_seconds: i64) -> String {
    let days = unix_seconds.div_euclid(86_400);
    let (year, month, day) = civil_from_days(days);
    format!("{year:04}-{month:02}-{day:02}")
}

/// Year, month and day of a count of days since 1970-01-01. Counts 400-year eras of 146 097
/// days from 0000-03-01, so that the leap day falls at the end of each shifted year.
fn civil_from_days(days: i64) -> (i64, u32, u32) {
    let shifted = days + 719_468; // days from 0000-03-01 to 1970-01-01
    let era = shifted.div_euclid(146_097);
    let day_of_era = shifted.rem_euclid(146_097);
    let year_of_era =
        (day_of_era - day_of_era / 1460 + day_of_era / 36_524 - day_of_era / 146_096) / 365;
    let day_of_year = day_of_era - (365 * year_of_era + year_of_era / 4 - year_of_era / 100);
    let month_from_march = (5 * day_of_year + 2) / 153;
    let day = (day_of_year - (153 * month_from_march + 2) / 5 + 1) as u32;
    let month = if month_from_march < 10 {
        month_from_march + 3
    } else {
        month_from_march - 9
    } as u32;
    let year = year_of_era + era * 400 + i64::from(month <= 2);
    (year, month, day)
}

/// Checks a `YYYY-MM-DD` date (a real day of the Gregorian calendar, years 1–9999; the same
/// rule as an application's date in a queue file) and returns it.
pub fn parse_date(text: &str) -> Option<String> {
    headroom_capacity::ApplicationDate::parse(text).map(|_| text.to_string())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn known_dates() {
        // Checked against `date -u -d @SECONDS +%F` (GNU coreutils).
        assert_eq!(date_from_unix_seconds(0), "1970-01-01");
        assert_eq!(date_from_unix_seconds(951_782_400), "2000-02-29");
        assert_eq!(date_from_unix_seconds(951_868_799), "2000-02-29");
        assert_eq!(date_from_unix_seconds(951_868_800), "2000-03-01");
        assert_eq!(date_from_unix_seconds(1_709_251_199), "2024-02-29");
        assert_eq!(date_from_unix_seconds(1_735_689_600), "2025-01-01");
        assert_eq!(date_from_unix_seconds(-1), "1969-12-31");
        assert_eq!(date_from_unix_seconds(4_107_542_400), "2100-03-01");
    }

    #[test]
    fn every_day_follows_the_last() {
        // 1960 to 2100, day by day: each date is the day after the previous one.
        let mut previous = date_from_unix_seconds(-3_653 * 86_400);
        for day in -3_652..47_482 {
            let date = date_from_unix_seconds(day * 86_400);
            assert!(date > previous, "{previous} then {date}");
            assert!(parse_date(&date).is_some(), "{date}");
            previous = date;
        }
    }

    #[test]
    fn parse_accepts_real_days_only() {
        assert_eq!(parse_date("2024-02-29").as_deref(), Some("2024-02-29"));
        for bad in [
            "2023-02-29",
            "1900-02-29",
            "2024-13-01",
            "2024-04-31",
            "2024-1-01",
            "24-01-01",
            "2024/01/01",
            "2024-01-0a",
            "",
        ] {
            assert_eq!(parse_date(bad), None, "{bad}");
        }
    }
}

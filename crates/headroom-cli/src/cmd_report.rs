//! `headroom report`: one self-contained HTML page from the tables of a map run.

use std::time::{SystemTime, UNIX_EPOCH};

use headroom_report::{PageOptions, build_report, date_from_unix_seconds, read_run, render_html};

use crate::args::ReportArgs;
use crate::output::{prepare_out_dir, write_text};
use crate::{CAUTION, Failure};

pub fn run(args: &ReportArgs) -> Result<(), Failure> {
    let date = report_date(
        args.date.as_deref(),
        std::env::var("SOURCE_DATE_EPOCH").ok(),
    )?;
    let run = read_run(&args.run_dir)
        .map_err(|e| Failure::Invalid(format!("error: {e}\nnothing was written.")))?;
    let mut thresholds_kw = args.below_kw.clone();
    thresholds_kw.sort_by(f64::total_cmp);
    thresholds_kw.dedup();
    let report = build_report(&run, &thresholds_kw);
    let html = render_html(&report, &PageOptions { date });
    if let Some(parent) = args.out.parent().filter(|p| !p.as_os_str().is_empty()) {
        prepare_out_dir(parent)?;
    }
    write_text(&args.out, &html)?;
    let n_nodes: u64 = report.feeders.iter().map(|f| f.overall.n_nodes).sum();
    say!(
        "Report of {} feeder(s), {} node(s), {} scenario(s), {} baseline violation(s) written to {}",
        report.feeders.len(),
        n_nodes,
        report.scenarios.len(),
        report.baseline.len(),
        args.out.display()
    );
    say!("{CAUTION}");
    Ok(())
}

/// The report's date: `--date`, else `SOURCE_DATE_EPOCH` (seconds since 1970, for reproducible
/// output), else today (UTC).
fn report_date(given: Option<&str>, epoch: Option<String>) -> Result<String, Failure> {
    if let Some(date) = given {
        return Ok(date.to_string()); // checked by the argument parser
    }
    if let Some(text) = epoch.filter(|t| !t.trim().is_empty()) {
        let seconds: i64 = text.trim().parse().map_err(|_| {
            Failure::Invalid(format!(
                "error: SOURCE_DATE_EPOCH: {text:?} is not a whole number of seconds since \
                 1970-01-01\nnothing was written."
            ))
        })?;
        return Ok(date_from_unix_seconds(seconds));
    }
    let now = SystemTime::now()
        .duration_since(UNIX_EPOCH)
        .map(|d| d.as_secs() as i64)
        .unwrap_or(0);
    Ok(date_from_unix_seconds(now))
}

/// Checks `--date` for the argument parser.
pub fn parse_date_arg(text: &str) -> Result<String, String> {
    headroom_report::parse_date(text)
        .ok_or_else(|| format!("{text:?} is not a calendar date written YYYY-MM-DD"))
}

/// Checks one `--below-kw` threshold for the argument parser.
pub fn parse_threshold_kw(text: &str) -> Result<f64, String> {
    match text.trim().parse::<f64>() {
        Ok(v) if v.is_finite() && v > 0.0 => Ok(v),
        _ => Err(format!("{text:?} is not a positive number of kW")),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn date_comes_from_the_argument_then_source_date_epoch() {
        assert_eq!(
            report_date(Some("2025-03-04"), Some("0".into())).ok(),
            Some("2025-03-04".to_string())
        );
        assert_eq!(
            report_date(None, Some("1735689600".into())).ok(),
            Some("2025-01-01".to_string())
        );
        assert!(matches!(
            report_date(None, Some("soon".into())),
            Err(Failure::Invalid(_))
        ));
        // Without either: today, a well-formed date.
        let today = report_date(None, None).ok().unwrap();
        assert!(headroom_report::parse_date(&today).is_some(), "{today}");
    }

    #[test]
    fn arguments_are_checked() {
        assert!(parse_date_arg("2025-02-30").is_err());
        assert_eq!(parse_threshold_kw("250").ok(), Some(250.0));
        assert!(parse_threshold_kw("-5").is_err());
        assert!(parse_threshold_kw("NaN").is_err());
    }
}

//! The page: one self-contained HTML document (inline CSS and SVG, no scripts, nothing
//! fetched), laid out for the screen and for A4 print.

use std::fmt::Write;

use crate::escape::escape;
use crate::layout::LayoutKind;
use crate::limit::{Limit, LimitCounts};
use crate::palette::group_thousands;
use crate::read::BaselineRow;
use crate::report::{FeederReport, GroupRow, Report};
use crate::stats::{CapacitySummary, histogram};
use crate::svg::{feeder_map, histogram_svg, limits_svg};

macro_rules! w {
    ($out:expr, $($arg:tt)*) => {{
        let _ = write!($out, $($arg)*);
    }};
}

/// The caution printed at the top and the foot of every report.
pub const CAUTION: &str = "Hosting-capacity results are planning estimates. They come from a \
simplified model: a balanced positive-sequence load flow, constant-power loads, the scenarios \
and limits listed under Study settings, and no protection, harmonics, flicker or unbalance \
studies. Every connection must be confirmed under local codes and by licensed engineers.";

/// Most baseline rows listed one by one; the rest are counted in the summary above the list.
pub const MAX_BASELINE_ROWS: usize = 500;

/// Options of the page.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct PageOptions {
    /// The date printed on the report, `YYYY-MM-DD`. The caller chooses it (e.g. from
    /// `SOURCE_DATE_EPOCH`), so that the same run and date give the same bytes.
    pub date: String,
}

const STYLE: &str = r#"
:root { color-scheme: light; }
* { box-sizing: border-box; }
body { margin: 0; background: #fff; color: #1d1d1f;
  font: 14px/1.45 system-ui, -apple-system, "Segoe UI", Roboto, "Helvetica Neue", Arial, sans-serif; }
main { max-width: 1000px; margin: 0 auto; padding: 24px 20px 48px; }
h1 { font-size: 26px; margin: 0 0 2px; }
h2 { font-size: 20px; margin: 34px 0 10px; padding-bottom: 4px; border-bottom: 1px solid #cfcfcf; }
h3 { font-size: 17px; margin: 0 0 2px; }
.subtitle { margin: 0; color: #444; }
.caution { margin: 16px 0; padding: 10px 14px; border-left: 5px solid #351666; background: #f2eff7; }
.note { color: #444; font-size: 13px; }
table { width: 100%; border-collapse: collapse; font-size: 13px; font-variant-numeric: tabular-nums; margin: 6px 0 10px; }
th, td { padding: 3px 6px; border-bottom: 1px solid #e3e3e3; text-align: left; vertical-align: top; overflow-wrap: break-word; }
th { font-weight: 600; border-bottom: 1.5px solid #9a9a9a; vertical-align: bottom; }
.num { text-align: right; }
td.num { white-space: nowrap; }
td.share { white-space: normal; }
td.binding { font-size: 12px; }
tr.total td { font-weight: 600; border-top: 1.5px solid #9a9a9a; }
tr.worst td { font-weight: 600; }
dl.meta { display: grid; grid-template-columns: minmax(120px, max-content) minmax(0, 1fr); gap: 3px 18px; margin: 0; }
dl.meta dt { color: #555; }
dl.meta dd { margin: 0; overflow-wrap: anywhere; }
code { font-size: 12.5px; }
nav.contents ol { columns: 2; margin: 4px 0; padding-left: 22px; }
.feeder { margin-top: 40px; padding-top: 8px; border-top: 3px solid #351666; }
.facts { margin: 0 0 8px; color: #444; }
.id { font-weight: 400; color: #555; font-size: 14px; }
figure { margin: 10px 0; }
caption { text-align: left; padding: 2px 0; }
figcaption { font-size: 12.5px; color: #444; margin-top: 4px; }
svg { display: block; width: 100%; height: auto; max-width: 100%; }
.charts { display: grid; grid-template-columns: repeat(auto-fit, minmax(280px, 1fr)); gap: 18px; align-items: start; }
footer { margin-top: 40px; padding-top: 8px; border-top: 1px solid #cfcfcf; font-size: 12.5px; color: #444; }
@page { margin: 14mm 12mm; }
@media print {
  body { font-size: 10pt; }
  table { font-size: 9pt; }
  main { max-width: none; padding: 0; }
  nav.contents { display: none; }
  .feeder, #feeders > h2, #baseline-list { break-before: page; border-top: none; }
  #feeders > h2 + .feeder { break-before: auto; }
  figure, tr, .caution, dl.meta { break-inside: avoid; }
  h2, h3 { break-after: avoid; }
  a { color: inherit; text-decoration: none; }
  * { -webkit-print-color-adjust: exact; print-color-adjust: exact; }
}
"#;

/// The whole page as one HTML document.
pub fn render_html(report: &Report, options: &PageOptions) -> String {
    let regions: Vec<&str> = report
        .groups
        .iter()
        .filter(|g| g.is_total)
        .filter_map(|g| g.region.as_deref())
        .collect();
    let title = if regions.is_empty() {
        "Hosting capacity report".to_string()
    } else {
        format!("Hosting capacity report: {}", regions.join(", "))
    };
    let n_nodes: u64 = report.feeders.iter().map(|f| f.overall.n_nodes).sum();
    let mut out = String::new();
    w!(
        out,
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n\
         <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n\
         <meta name=\"generator\" content=\"headroom {}\">\n<title>{}</title>\n<style>{STYLE}</style>\n</head>\n<body>\n<main>\n",
        escape(report.meta.version.as_deref().unwrap_or("")),
        escape(&title)
    );
    w!(
        out,
        "<header><h1>{}</h1><p class=\"subtitle\">{} feeder{} · {} nodes · {} scenario{} · report of {}</p></header>\n",
        escape(&title),
        report.feeders.len(),
        plural(report.feeders.len()),
        group_thousands(n_nodes as f64),
        report.scenarios.len(),
        plural(report.scenarios.len()),
        escape(&options.date)
    );
    caution(&mut out);
    contents(&mut out, report);
    run_section(&mut out, report, options);
    region_section(&mut out, report);
    baseline_section(&mut out, report);
    out.push_str("<section id=\"feeders\"><h2>Feeders</h2>\n");
    for (i, feeder) in report.feeders.iter().enumerate() {
        feeder_section(&mut out, report, feeder, i);
    }
    out.push_str("</section>\n");
    baseline_list(&mut out, report);
    out.push_str("<footer>");
    w!(out, "<p><strong>Caution.</strong> {}</p>", escape(CAUTION));
    if let Some(recorded) = &report.meta.caution {
        w!(out, "<p>Recorded with the run: {}</p>", escape(recorded));
    }
    w!(
        out,
        "<p>Made with headroom {} from the run folder's Parquet tables; report of {}.</p>",
        escape(
            report
                .meta
                .version
                .as_deref()
                .unwrap_or("(version not recorded)")
        ),
        escape(&options.date)
    );
    out.push_str("</footer>\n</main>\n</body>\n</html>\n");
    out
}

/// A recorded kW value with grouped thousands when it is a whole number.
fn kw_text(text: &str) -> String {
    match text.parse::<f64>() {
        Ok(v) if v.fract() == 0.0 && v.abs() < 1e15 => group_thousands(v),
        _ => text.to_string(),
    }
}

fn plural(n: usize) -> &'static str {
    if n == 1 { "" } else { "s" }
}

fn caution(out: &mut String) {
    w!(
        out,
        "<section class=\"caution\" role=\"note\"><strong>Caution.</strong> {}</section>\n",
        escape(CAUTION)
    );
}

fn contents(out: &mut String, report: &Report) {
    out.push_str(
        "<nav class=\"contents\"><h2>Contents</h2><ol>\
         <li><a href=\"#run\">Study settings</a></li>\
         <li><a href=\"#regions\">Regions and substations</a></li>\
         <li><a href=\"#baseline\">Baseline violations</a></li>",
    );
    let appendix = if report.baseline.is_empty() {
        ""
    } else {
        "<li><a href=\"#baseline-list\">Appendix: baseline violations one by one</a></li>"
    };
    for (i, f) in report.feeders.iter().enumerate() {
        w!(
            out,
            "<li><a href=\"#feeder-{}\">{}</a></li>",
            i + 1,
            escape(display_name(f))
        );
    }
    w!(out, "{appendix}</ol></nav>\n");
}

fn display_name(f: &FeederReport) -> &str {
    f.info.name.as_deref().unwrap_or(&f.info.id)
}

/// `key=value` settings of the recorded study text, grouped as recorded.
struct StudyText<'a> {
    values: Vec<(&'a str, String)>,
    scenarios: Option<&'a str>,
}

/// Splits the study text of run.json (`v_min_pu=0.95 …; step_kw=50 …; power_factor=1
/// absorbing; scenarios: …`). Words without `=` belong to the value before them.
fn parse_study(text: &str) -> StudyText<'_> {
    let mut values: Vec<(&str, String)> = Vec::new();
    let mut scenarios = None;
    for part in text.split("; ") {
        if let Some(list) = part.strip_prefix("scenarios: ") {
            scenarios = Some(list);
            continue;
        }
        for word in part.split_whitespace() {
            match word.split_once('=') {
                Some((key, value)) => values.push((key, value.to_string())),
                None => {
                    if let Some(last) = values.last_mut() {
                        last.1.push(' ');
                        last.1.push_str(word);
                    }
                }
            }
        }
    }
    StudyText { values, scenarios }
}

fn run_section(out: &mut String, report: &Report, options: &PageOptions) {
    out.push_str("<section id=\"run\"><h2>Study settings</h2><dl class=\"meta\">");
    let mut item = |label: &str, value: &str| {
        w!(out, "<dt>{}</dt><dd>{}</dd>", escape(label), value);
    };
    item("Report date", &escape(&options.date));
    item(
        "Made with",
        &format!(
            "headroom {}{}",
            escape(
                report
                    .meta
                    .version
                    .as_deref()
                    .unwrap_or("(version not recorded)")
            ),
            report
                .meta
                .search
                .as_deref()
                .map(|s| format!(" (search: {})", escape(s)))
                .unwrap_or_default()
        ),
    );
    if let Some(input) = &report.meta.input {
        item("Feeder models", &format!("<code>{}</code>", escape(input)));
    }
    let study = report.meta.study.as_deref().map(parse_study);
    let get = |key: &str| -> Option<String> {
        study
            .as_ref()?
            .values
            .iter()
            .find(|(k, _)| *k == key)
            .map(|(_, v)| escape(v))
    };
    match study.as_ref().and_then(|s| s.scenarios) {
        Some(list) => item("Scenarios", &escape(list)),
        None => item("Scenarios", &escape(&report.scenarios.join(", "))),
    }
    if let (Some(lo), Some(hi)) = (get("v_min_pu"), get("v_max_pu")) {
        item(
            "Voltage band",
            &format!("{lo} to {hi} pu at every node, head included"),
        );
    }
    if let Some(t) = get("thermal_pct") {
        item("Branch current", &format!("at most {t} % of the rating"));
    }
    if let Some(v) = get("voltage_change_pct") {
        let off = v == "0";
        item(
            "Voltage change on trip",
            &if off {
                "not checked".to_string()
            } else {
                format!("at most {v} % of nominal at any node when the new generation trips")
            },
        );
    }
    if let Some(r) = get("reverse_flow") {
        item(
            "Reverse power at the head",
            match r.as_str() {
                "allow" => "allowed",
                "forbid" => "forbidden",
                other => other,
            },
        );
    }
    if let (Some(step), Some(res), Some(max)) =
        (get("step_kw"), get("resolution_kw"), get("max_kw"))
    {
        item(
            "Search",
            &format!(
                "steps of {} kW, resolution {} kW, ceiling {} kW",
                kw_text(&step),
                kw_text(&res),
                kw_text(&max)
            ),
        );
    }
    if let Some(pf) = get("power_factor") {
        item("New generation", &format!("power factor {pf}"));
    }
    if let Some(raw) = &report.meta.study {
        item("As recorded", &format!("<code>{}</code>", escape(raw)));
    }
    item(
        "Run tables",
        &report
            .meta
            .files
            .iter()
            .map(|f| format!("<code>{}</code>", escape(f)))
            .collect::<Vec<_>>()
            .join(", "),
    );
    item(
        "Shown on maps",
        "each node's worst case: its lowest hosting capacity over the scenarios, with the \
         criterion that binds in that scenario. The tables per feeder give every scenario.",
    );
    out.push_str("</dl></section>\n");
}

/// Nodes per binding criterion as text, one criterion per line: `thermal 12<br>…`.
fn binding_text(counts: &LimitCounts, separator: &str) -> String {
    let parts: Vec<String> = counts
        .nonzero()
        .into_iter()
        .map(|(l, n)| format!("{}&nbsp;{n}", l.label()))
        .collect();
    if parts.is_empty() {
        "–".to_string()
    } else {
        parts.join(separator)
    }
}

fn kw_cell(value: Option<f64>) -> String {
    match value {
        Some(v) => format!("<td class=\"num\">{}</td>", group_thousands(v)),
        None => "<td class=\"num\">–</td>".to_string(),
    }
}

fn share_cells(summary: &CapacitySummary) -> String {
    let mut out = String::new();
    for (i, below) in summary.below.iter().enumerate() {
        w!(
            out,
            "<td class=\"num share\">{:.1}&nbsp;% <span class=\"note\">({})</span></td>",
            100.0 * summary.share_below(i),
            below.n_nodes
        );
    }
    out
}

fn summary_header(out: &mut String, report: &Report) {
    out.push_str(
        "<th class=\"num\">Nodes</th><th class=\"num\">Lowest kW</th>\
         <th class=\"num\">Median kW</th><th class=\"num\">Highest kW</th>",
    );
    for t in &report.thresholds_kw {
        w!(
            out,
            "<th class=\"num\">Below {} kW</th>",
            group_thousands(*t)
        );
    }
    out.push_str("<th>Binding criterion (nodes)</th>");
}

fn summary_cells(out: &mut String, s: &CapacitySummary) {
    w!(
        out,
        "<td class=\"num\">{}</td>{}{}{}{}<td class=\"binding\">{}</td>",
        s.n_nodes,
        kw_cell(s.lowest_kw),
        kw_cell(s.median_kw),
        kw_cell(s.highest_kw),
        share_cells(s),
        binding_text(&s.by_limit, "<br>")
    );
}

fn region_section(out: &mut String, report: &Report) {
    out.push_str(
        "<section id=\"regions\"><h2>Regions and substations</h2>\
         <p class=\"note\">Worst case of each node over the scenarios. “Below” columns: share of \
         nodes whose hosting capacity is under the threshold (count in brackets). The last \
         column counts nodes by the criterion that binds first.</p>\
         <table class=\"regions\"><thead><tr><th>Region</th><th>Substation</th><th class=\"num\">Feeders</th>",
    );
    summary_header(out, report);
    out.push_str("</tr></thead><tbody>");
    for g in &report.groups {
        group_row(out, g);
    }
    out.push_str("</tbody></table>");

    out.push_str("<table class=\"feeders\"><thead><tr><th>Feeder</th><th class=\"num\">kV</th>");
    summary_header(out, report);
    out.push_str("<th class=\"num\">Baseline violations</th></tr></thead><tbody>");
    for (i, f) in report.feeders.iter().enumerate() {
        w!(
            out,
            "<tr><td><a href=\"#feeder-{}\">{}</a></td><td class=\"num\">{}</td>",
            i + 1,
            escape(display_name(f)),
            f.info
                .nominal_kv
                .map(|kv| format!("{kv}"))
                .unwrap_or_else(|| "–".into())
        );
        summary_cells(out, &f.overall);
        w!(out, "<td class=\"num\">{}</td></tr>", f.n_baseline);
    }
    out.push_str("</tbody></table></section>\n");
}

fn group_row(out: &mut String, g: &GroupRow) {
    let region = escape(g.region.as_deref().unwrap_or("(no region)"));
    let substation = if g.is_total {
        "all substations".to_string()
    } else {
        escape(g.substation.as_deref().unwrap_or("(no substation)"))
    };
    w!(
        out,
        "<tr{}><td>{region}</td><td>{substation}</td><td class=\"num\">{}</td>",
        if g.is_total { " class=\"total\"" } else { "" },
        g.n_feeders
    );
    summary_cells(out, &g.summary);
    out.push_str("</tr>");
}

/// How far a baseline value lies past its limit, in its unit.
fn excess(row: &BaselineRow) -> f64 {
    match row.limit {
        Limit::Undervoltage => row.threshold - row.value,
        _ => row.value - row.threshold,
    }
}

fn format_value(value: f64, unit: &str) -> String {
    match unit {
        "pu" => format!("{value:.4} pu"),
        "A" => format!("{value:.1} A"),
        "kW" => format!("{} kW", group_thousands(value)),
        "" => format!("{value}"),
        other => format!("{value} {}", escape(other)),
    }
}

fn baseline_section(out: &mut String, report: &Report) {
    out.push_str(
        "<section id=\"baseline\"><h2>Baseline violations</h2>\
         <p class=\"note\">Limits already broken with no new generation. They are not charged to \
         new generation: a baseline violation binds only when the generation makes it worse.</p>",
    );
    if report.baseline.is_empty() {
        out.push_str(
            "<p>None: every limit holds in every scenario before new generation.</p></section>\n",
        );
        return;
    }
    // Summary per feeder, scenario and criterion, in report order.
    out.push_str(
        "<table class=\"baseline-summary\"><thead><tr><th>Feeder</th><th>Scenario</th><th>Criterion</th>\
         <th class=\"num\">Elements</th><th class=\"num\">Worst value</th><th class=\"num\">Limit</th></tr></thead><tbody>",
    );
    let name_of = |id: &str| {
        report
            .feeders
            .iter()
            .find(|f| f.info.id == id)
            .map(display_name)
            .unwrap_or(id)
            .to_string()
    };
    let mut start = 0;
    while start < report.baseline.len() {
        let first = &report.baseline[start];
        let end = start
            + report.baseline[start..]
                .iter()
                .take_while(|r| {
                    r.feeder == first.feeder
                        && r.scenario == first.scenario
                        && r.limit == first.limit
                })
                .count();
        let group = &report.baseline[start..end];
        let worst = group
            .iter()
            .max_by(|a, b| excess(a).total_cmp(&excess(b)))
            .unwrap_or(first);
        w!(
            out,
            "<tr><td>{}</td><td>{}</td><td>{}</td><td class=\"num\">{}</td><td class=\"num\">{}{}</td><td class=\"num\">{}</td></tr>",
            escape(&name_of(&first.feeder)),
            escape(&first.scenario),
            first.limit.label(),
            group.len(),
            format_value(worst.value, &worst.unit),
            worst
                .element
                .as_deref()
                .map(|e| format!(" <span class=\"note\">at {}</span>", escape(e)))
                .unwrap_or_default(),
            format_value(first.threshold, &first.unit)
        );
        start = end;
    }
    out.push_str(
        "</tbody></table><p class=\"note\">Each violation is listed in the \
         <a href=\"#baseline-list\">appendix</a>.</p></section>\n",
    );
}

/// The appendix: every baseline violation on its own row (at most [`MAX_BASELINE_ROWS`]).
fn baseline_list(out: &mut String, report: &Report) {
    if report.baseline.is_empty() {
        return;
    }
    out.push_str(
        "<section id=\"baseline-list\"><h2>Appendix: baseline violations one by one</h2>\
         <table class=\"baseline\"><thead><tr><th>Feeder</th><th>Scenario</th><th>Criterion</th>\
         <th>Element</th><th class=\"num\">Value</th><th class=\"num\">Limit</th></tr></thead><tbody>",
    );
    for row in report.baseline.iter().take(MAX_BASELINE_ROWS) {
        w!(
            out,
            "<tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td></tr>",
            escape(&row.feeder),
            escape(&row.scenario),
            row.limit.label(),
            escape(row.element.as_deref().unwrap_or("–")),
            format_value(row.value, &row.unit),
            format_value(row.threshold, &row.unit)
        );
    }
    out.push_str("</tbody></table>");
    if report.baseline.len() > MAX_BASELINE_ROWS {
        w!(
            out,
            "<p class=\"note\">The first {MAX_BASELINE_ROWS} of {} rows are listed; all are in \
             <code>baseline*.parquet</code> and counted in the summary.</p>",
            report.baseline.len()
        );
    }
    out.push_str("</section>\n");
}

fn feeder_section(out: &mut String, report: &Report, f: &FeederReport, i: usize) {
    let info = &f.info;
    w!(
        out,
        "<section class=\"feeder\" id=\"feeder-{}\" data-feeder=\"{}\"><h3>{} <span class=\"id\">{}</span></h3>",
        i + 1,
        escape(&info.id),
        escape(display_name(f)),
        escape(&info.id)
    );
    let (map_svg, map) = feeder_map(f);
    let mut facts: Vec<String> = Vec::new();
    if let Some(r) = &info.region {
        facts.push(format!("region {}", escape(r)));
    }
    if let Some(s) = &info.substation {
        facts.push(format!("substation {}", escape(s)));
    }
    if let Some(kv) = info.nominal_kv {
        facts.push(format!("{kv} kV"));
    }
    facts.push(format!(
        "{} nodes besides the head{}",
        group_thousands(f.worst.len() as f64),
        f.head
            .as_deref()
            .map(|h| format!(" ({})", escape(h)))
            .unwrap_or_default()
    ));
    facts.push(format!(
        "{} baseline violation{}",
        f.n_baseline,
        plural(f.n_baseline)
    ));
    w!(out, "<p class=\"facts\">{}</p>", facts.join(" · "));

    // Per scenario and the worst case.
    out.push_str(
        "<table class=\"scenarios\"><thead><tr><th>Scenario</th><th class=\"num\">Lowest kW</th>\
         <th class=\"num\">Median kW</th><th class=\"num\">Highest kW</th>",
    );
    for t in &report.thresholds_kw {
        w!(
            out,
            "<th class=\"num\">Below {} kW</th>",
            group_thousands(*t)
        );
    }
    out.push_str("<th>Binding criteria (nodes)</th></tr></thead><tbody>");
    let mut scenario_row = |label: &str, s: &CapacitySummary, class: &str| {
        w!(
            out,
            "<tr{class}><td>{}</td>{}{}{}{}<td>{}</td></tr>",
            escape(label),
            kw_cell(s.lowest_kw),
            kw_cell(s.median_kw),
            kw_cell(s.highest_kw),
            share_cells(s),
            binding_text(&s.by_limit, ", ")
        );
    };
    for (name, s) in &f.per_scenario {
        scenario_row(name, s, "");
    }
    scenario_row("worst case", &f.overall, " class=\"worst\"");
    out.push_str("</tbody></table>");

    let drawing = match map.kind {
        LayoutKind::Geographic => format!(
            "Drawn from the node coordinates{}, north up, one scale for both axes.",
            info.crs
                .as_deref()
                .map(|c| format!(" ({})", escape(c)))
                .unwrap_or_default()
        ),
        LayoutKind::Schematic => "Schematic: the feeder has no coordinates, so it is drawn from \
             its tree, from the head on the left; the longest path runs straight and each side \
             branch starts a row below. Distances are not to scale."
            .to_string(),
    };
    w!(
        out,
        "<figure class=\"map\">{map_svg}<figcaption>Hosting capacity of each node, worst case over \
         the scenarios. {drawing} Hover a mark for the node, its capacity, the binding criterion \
         and the scenario.</figcaption></figure>"
    );
    let values: Vec<f64> = f.worst.iter().map(|w| w.hosting_kw).collect();
    let hist = histogram(&values, 20);
    w!(
        out,
        "<div class=\"charts\"><figure>{}<figcaption>Nodes per {} kW of hosting capacity (worst \
         case).</figcaption></figure><figure>{}<figcaption>Nodes by the criterion that binds \
         first (worst case).</figcaption></figure></div>",
        histogram_svg(&info.id, &hist),
        group_thousands(hist.step_kw),
        limits_svg(&info.id, &f.overall.by_limit)
    );

    // The lowest nodes: where new generation is hardest to place.
    let mut lowest: Vec<usize> = (0..f.worst.len()).collect();
    lowest.sort_by(|&a, &b| {
        f.worst[a]
            .hosting_kw
            .total_cmp(&f.worst[b].hosting_kw)
            .then_with(|| f.worst[a].node.cmp(&f.worst[b].node))
    });
    if !lowest.is_empty() {
        out.push_str(
            "<table class=\"lowest\"><caption class=\"note\">Lowest five nodes (worst case)</caption>\
             <thead><tr><th>Node</th><th class=\"num\">kW</th><th>Binding criterion</th><th>At</th>\
             <th>Scenario</th></tr></thead><tbody>",
        );
        for &k in lowest.iter().take(5) {
            let n = &f.worst[k];
            w!(
                out,
                "<tr><td>{}</td><td class=\"num\">{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
                escape(&n.node),
                group_thousands(n.hosting_kw),
                n.limit.label(),
                escape(n.limit_element.as_deref().unwrap_or("–")),
                escape(&n.scenario)
            );
        }
        out.push_str("</tbody></table>");
    }
    out.push_str("</section>\n");
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn study_text_splits_into_settings_and_scenarios() {
        let s = parse_study(
            "v_min_pu=0.95 v_max_pu=1.05 thermal_pct=100; step_kw=50; power_factor=0.95 \
             absorbing; scenarios: min-load (loads x0.3, generation x1)",
        );
        assert_eq!(
            s.values,
            vec![
                ("v_min_pu", "0.95".to_string()),
                ("v_max_pu", "1.05".to_string()),
                ("thermal_pct", "100".to_string()),
                ("step_kw", "50".to_string()),
                ("power_factor", "0.95 absorbing".to_string()),
            ]
        );
        assert_eq!(s.scenarios, Some("min-load (loads x0.3, generation x1)"));
    }

    #[test]
    fn baseline_excess_points_past_the_limit() {
        let row = |limit, value, threshold| BaselineRow {
            feeder: "f".into(),
            scenario: "s".into(),
            limit,
            element: None,
            value,
            threshold,
            unit: "pu".into(),
        };
        assert!(excess(&row(Limit::Undervoltage, 0.93, 0.95)) > 0.0);
        assert!(excess(&row(Limit::Overvoltage, 1.07, 1.05)) > 0.0);
    }
}

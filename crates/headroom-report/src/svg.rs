//! Hand-written SVG: the feeder map with its legend, the capacity histogram and the bar chart of
//! binding criteria. Plain text out, no scripts, no external references.

use std::fmt::Write;

use crate::escape::escape;
use crate::layout::{Frame, LayoutKind, MapLayout, layout};
use crate::limit::LimitCounts;
use crate::palette::{BIN_COLOURS, N_BINS, bin_label, bin_of, group_thousands};
use crate::report::FeederReport;
use crate::stats::{Histogram, nice_step};

macro_rules! w {
    ($out:expr, $($arg:tt)*) => {{
        let _ = write!($out, $($arg)*);
    }};
}

/// Width of a map drawing (without the legend), px.
const MAP_WIDTH_PX: f64 = 700.0;
/// Width of the legend panel at the map's right, px.
const LEGEND_WIDTH_PX: f64 = 200.0;
/// Colour of branches and axes.
const LINE_COLOUR: &str = "#7d828c";
/// Colour of chart bars: the second colour of the ramp.
const BAR_COLOUR: &str = "#243c8d";
/// Colour of the head mark.
const HEAD_COLOUR: &str = "#1d1d1f";

/// A number for SVG attributes: one decimal at most, no `-0`.
pub fn num(value: f64) -> String {
    let text = format!("{value:.1}");
    let text = text.strip_suffix(".0").unwrap_or(&text).to_string();
    if text == "-0" { "0".to_string() } else { text }
}

/// Radius of the node marks: smaller marks for larger feeders, so the lines stay visible.
fn mark_radius_px(n_nodes: usize) -> f64 {
    match n_nodes {
        0..=150 => 4.5,
        151..=600 => 3.5,
        601..=2000 => 2.6,
        _ => 1.8,
    }
}

/// True when the CRS is known to be in metres (WGS 84 / UTM zones and a few common grids).
fn crs_in_metres(crs: Option<&str>) -> bool {
    let Some(code) = crs.map(str::to_ascii_uppercase) else {
        return false;
    };
    code.strip_prefix("EPSG:")
        .and_then(|n| n.parse::<u32>().ok())
        .is_some_and(|n| {
            (32601..=32660).contains(&n)
                || (32701..=32760).contains(&n)
                || matches!(n, 3857 | 27700 | 2157 | 3035 | 25829..=25835 | 2154)
        })
}

/// Length in CRS units as text: `500 m`, `2 km`, or `2 500 units`.
fn distance_label(units: f64, metres: bool) -> String {
    if metres && units >= 1000.0 {
        format!("{} km", num(units / 1000.0))
    } else if metres {
        format!("{} m", num(units))
    } else {
        format!("{} units", num(units))
    }
}

/// The map of one feeder: branches as lines, one mark per node coloured by its worst-case
/// hosting capacity, the head as a square, a legend with the count per bin, and a scale bar
/// for coordinates in a projected CRS. Returns the SVG and the layout used.
pub fn feeder_map(feeder: &FeederReport) -> (String, MapLayout) {
    let frame = Frame {
        width_px: MAP_WIDTH_PX,
        min_height_px: 300.0,
        max_height_px: 620.0,
        pad_px: 18.0,
    };
    let map = layout(feeder, frame);
    let width_px = MAP_WIDTH_PX + LEGEND_WIDTH_PX;
    let height_px = map.height_px;
    let id = escape(&feeder.info.id);
    let kind = match map.kind {
        LayoutKind::Geographic => "geographic",
        LayoutKind::Schematic => "schematic",
    };
    let mut out = String::new();
    w!(
        out,
        "<svg class=\"feeder-map\" data-feeder=\"{id}\" data-layout=\"{kind}\" data-nodes=\"{}\" \
         xmlns=\"http://www.w3.org/2000/svg\" viewBox=\"0 0 {} {}\" width=\"{}\" height=\"{}\" \
         role=\"img\">",
        feeder.worst.len(),
        num(width_px),
        num(height_px),
        num(width_px),
        num(height_px)
    );
    w!(
        out,
        "<title>Map of {}: hosting capacity of each node, worst case over the scenarios</title>",
        escape(feeder.info.name.as_deref().unwrap_or(&feeder.info.id))
    );
    w!(
        out,
        "<rect x=\"0\" y=\"0\" width=\"{}\" height=\"{}\" fill=\"#f6f6f3\"/>",
        num(MAP_WIDTH_PX),
        num(height_px)
    );

    // Branches: one path, one move-and-line run per branch.
    let mut d = String::new();
    for line in &map.branch_px {
        for (i, &(x, y)) in line.iter().enumerate() {
            w!(d, "{}{} {}", if i == 0 { "M" } else { "L" }, num(x), num(y));
        }
    }
    w!(
        out,
        "<path class=\"branches\" d=\"{d}\" fill=\"none\" stroke=\"{LINE_COLOUR}\" \
         stroke-width=\"1.3\" stroke-linejoin=\"round\" stroke-linecap=\"round\"/>"
    );

    // Nodes: highest capacity first, so the lowest (the ones that matter) are drawn on top.
    let mut order: Vec<usize> = (0..feeder.worst.len()).collect();
    order.sort_by(|&a, &b| {
        let (a, b) = (&feeder.worst[a], &feeder.worst[b]);
        b.hosting_kw
            .total_cmp(&a.hosting_kw)
            .then_with(|| a.node.cmp(&b.node))
    });
    let radius_px = mark_radius_px(feeder.worst.len());
    let r = num(radius_px);
    // A thin outline keeps light marks visible on the pale ground without darkening dense maps.
    w!(
        out,
        "<g class=\"node-marks\" stroke=\"#1d1d1f\" stroke-width=\"{}\">",
        if radius_px >= 3.5 { "0.6" } else { "0.3" }
    );
    for i in order {
        let node = &feeder.worst[i];
        let Some(&(x, y)) = map.node_px.get(&node.node) else {
            continue;
        };
        let place = node
            .limit_element
            .as_deref()
            .map(|e| format!(" at {}", escape(e)))
            .unwrap_or_default();
        w!(
            out,
            "<circle class=\"node-mark\" cx=\"{}\" cy=\"{}\" r=\"{r}\" fill=\"{}\"><title>{}: {} kW, {}{} ({})</title></circle>",
            num(x),
            num(y),
            BIN_COLOURS[bin_of(node.hosting_kw)],
            escape(&node.node),
            group_thousands(node.hosting_kw),
            node.limit.label(),
            place,
            escape(&node.scenario)
        );
    }
    out.push_str("</g>");
    if let Some((x, y)) = feeder.head.as_ref().and_then(|h| map.node_px.get(h)) {
        w!(
            out,
            "<rect class=\"head-mark\" x=\"{}\" y=\"{}\" width=\"10\" height=\"10\" fill=\"{HEAD_COLOUR}\"><title>head {}</title></rect>",
            num(x - 5.0),
            num(y - 5.0),
            escape(feeder.head.as_deref().unwrap_or_default())
        );
    }
    if let Some(units_per_px) = map.units_per_px {
        scale_bar(
            &mut out,
            units_per_px,
            height_px,
            crs_in_metres(feeder.info.crs.as_deref()),
        );
    }
    legend(&mut out, feeder);
    out.push_str("</svg>");
    (out, map)
}

/// A scale bar at the map's lower left, about 120 px long, in round CRS units.
fn scale_bar(out: &mut String, units_per_px: f64, height_px: f64, metres: bool) {
    let units = nice_step(120.0 * units_per_px, 1);
    let length_px = units / units_per_px;
    let (x, y) = (16.0, height_px - 16.0);
    w!(
        out,
        "<g class=\"scale-bar\"><path d=\"M{} {}V{}H{}V{}\" fill=\"none\" stroke=\"#1d1d1f\" stroke-width=\"1.5\"/>\
         <text x=\"{}\" y=\"{}\" font-size=\"12\" fill=\"#1d1d1f\">{}</text></g>",
        num(x),
        num(y - 5.0),
        num(y),
        num(x + length_px),
        num(y - 5.0),
        num(x + length_px + 6.0),
        num(y + 1.0),
        distance_label(units, metres)
    );
}

/// The legend panel: one row per capacity bin with the feeder's count, then the head mark.
fn legend(out: &mut String, feeder: &FeederReport) {
    let mut counts = [0u64; N_BINS];
    for node in &feeder.worst {
        counts[bin_of(node.hosting_kw)] += 1;
    }
    let x0 = MAP_WIDTH_PX + 14.0;
    w!(
        out,
        "<g class=\"legend\" font-size=\"12\" fill=\"#1d1d1f\">\
         <text x=\"{}\" y=\"20\" font-weight=\"600\">Hosting capacity</text>\
         <text x=\"{}\" y=\"36\" fill=\"#555\">worst case · nodes</text>",
        num(x0),
        num(x0)
    );
    // Highest bin at the top, like a vertical scale.
    for (row, bin) in (0..N_BINS).rev().enumerate() {
        let y = 58.0 + row as f64 * 22.0;
        w!(
            out,
            "<g class=\"legend-bin\"><circle cx=\"{}\" cy=\"{}\" r=\"6\" fill=\"{}\" stroke=\"#1d1d1f\" stroke-width=\"0.6\"/>\
             <text x=\"{}\" y=\"{}\">{}</text><text x=\"{}\" y=\"{}\" text-anchor=\"end\">{}</text></g>",
            num(x0 + 6.0),
            num(y - 4.0),
            BIN_COLOURS[bin],
            num(x0 + 18.0),
            num(y),
            escape(&bin_label(bin)),
            num(x0 + LEGEND_WIDTH_PX - 22.0),
            num(y),
            counts[bin]
        );
    }
    let y = 58.0 + N_BINS as f64 * 22.0 + 6.0;
    w!(
        out,
        "<rect x=\"{}\" y=\"{}\" width=\"10\" height=\"10\" fill=\"{HEAD_COLOUR}\"/>\
         <text x=\"{}\" y=\"{}\">feeder head</text>\
         <path d=\"M{} {}h16\" stroke=\"{LINE_COLOUR}\" stroke-width=\"1.3\"/>\
         <text x=\"{}\" y=\"{}\">branch</text></g>",
        num(x0 + 1.0),
        num(y - 9.0),
        num(x0 + 18.0),
        num(y),
        num(x0 - 2.0),
        num(y + 18.0),
        num(x0 + 18.0),
        num(y + 22.0)
    );
}

/// Chart frame: width, height and margins, px.
struct Chart {
    width_px: f64,
    height_px: f64,
    left_px: f64,
    right_px: f64,
    top_px: f64,
    bottom_px: f64,
}

impl Chart {
    fn inner_width(&self) -> f64 {
        self.width_px - self.left_px - self.right_px
    }
    fn inner_height(&self) -> f64 {
        self.height_px - self.top_px - self.bottom_px
    }
}

/// Histogram of worst-case capacities: nodes per round-width bin of kW.
pub fn histogram_svg(feeder_id: &str, hist: &Histogram) -> String {
    let c = Chart {
        width_px: 440.0,
        height_px: 240.0,
        left_px: 46.0,
        right_px: 26.0,
        top_px: 12.0,
        bottom_px: 46.0,
    };
    let mut out = String::new();
    w!(
        out,
        "<svg class=\"histogram\" data-feeder=\"{}\" xmlns=\"http://www.w3.org/2000/svg\" viewBox=\"0 0 {} {}\" \
         width=\"{}\" height=\"{}\" role=\"img\" font-size=\"12\" fill=\"#1d1d1f\">",
        escape(feeder_id),
        num(c.width_px),
        num(c.height_px),
        num(c.width_px),
        num(c.height_px)
    );
    w!(
        out,
        "<title>Histogram: nodes per {} kW of hosting capacity</title>",
        group_thousands(hist.step_kw)
    );
    let highest = hist.counts.iter().copied().max().unwrap_or(0).max(1);
    let count_step = nice_step(highest as f64, 4).max(1.0);
    let top = (highest as f64 / count_step).ceil() * count_step;
    let y_of = |count: f64| c.top_px + c.inner_height() * (1.0 - count / top);
    // Grid lines and count labels.
    let mut tick = 0.0;
    while tick <= top + 1e-9 {
        let y = y_of(tick);
        w!(
            out,
            "<path d=\"M{} {}H{}\" stroke=\"#e2e2e2\"/><text x=\"{}\" y=\"{}\" text-anchor=\"end\">{}</text>",
            num(c.left_px),
            num(y),
            num(c.width_px - c.right_px),
            num(c.left_px - 6.0),
            num(y + 4.0),
            num(tick)
        );
        tick += count_step;
    }
    let n = hist.counts.len().max(1);
    let bar_px = c.inner_width() / n as f64;
    for (i, &count) in hist.counts.iter().enumerate() {
        if count == 0 {
            continue;
        }
        let y = y_of(count as f64);
        w!(
            out,
            "<rect class=\"bar\" x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\" fill=\"{BAR_COLOUR}\"><title>{}–{} kW: {} nodes</title></rect>",
            num(c.left_px + i as f64 * bar_px + 0.5),
            num(y),
            num((bar_px - 1.0).max(0.5)),
            num(c.top_px + c.inner_height() - y),
            group_thousands(i as f64 * hist.step_kw),
            group_thousands((i + 1) as f64 * hist.step_kw),
            count
        );
    }
    // Axis with about five kW labels.
    let base = c.top_px + c.inner_height();
    w!(
        out,
        "<path d=\"M{} {}H{}\" stroke=\"{LINE_COLOUR}\"/>",
        num(c.left_px),
        num(base),
        num(c.width_px - c.right_px)
    );
    let every = n.div_ceil(5).max(1);
    for edge in (0..=n).step_by(every) {
        let x = c.left_px + edge as f64 * bar_px;
        w!(
            out,
            "<path d=\"M{} {}v4\" stroke=\"{LINE_COLOUR}\"/><text x=\"{}\" y=\"{}\" text-anchor=\"middle\">{}</text>",
            num(x),
            num(base),
            num(x),
            num(base + 16.0),
            group_thousands(edge as f64 * hist.step_kw)
        );
    }
    w!(
        out,
        "<text x=\"{}\" y=\"{}\" text-anchor=\"middle\">hosting capacity, kW</text>\
         <text transform=\"translate(12 {}) rotate(-90)\" text-anchor=\"middle\">nodes</text></svg>",
        num(c.left_px + c.inner_width() / 2.0),
        num(c.height_px - 6.0),
        num(c.top_px + c.inner_height() / 2.0)
    );
    out
}

/// Horizontal bars: nodes per binding criterion (those with at least one node).
pub fn limits_svg(feeder_id: &str, counts: &LimitCounts) -> String {
    let rows = counts.nonzero();
    let row_px = 26.0;
    let c = Chart {
        width_px: 440.0,
        height_px: 24.0 + row_px * rows.len().max(1) as f64,
        left_px: 160.0,
        right_px: 56.0,
        top_px: 12.0,
        bottom_px: 12.0,
    };
    let mut out = String::new();
    w!(
        out,
        "<svg class=\"limits-chart\" data-feeder=\"{}\" xmlns=\"http://www.w3.org/2000/svg\" viewBox=\"0 0 {} {}\" \
         width=\"{}\" height=\"{}\" role=\"img\" font-size=\"12\" fill=\"#1d1d1f\">\
         <title>Nodes per binding criterion</title>",
        escape(feeder_id),
        num(c.width_px),
        num(c.height_px),
        num(c.width_px),
        num(c.height_px)
    );
    let highest = rows.iter().map(|r| r.1).max().unwrap_or(1).max(1) as f64;
    if rows.is_empty() {
        w!(out, "<text x=\"10\" y=\"28\">no nodes</text>");
    }
    for (i, (limit, count)) in rows.iter().enumerate() {
        let y = c.top_px + i as f64 * row_px;
        let length = c.inner_width() * *count as f64 / highest;
        w!(
            out,
            "<text x=\"{}\" y=\"{}\" text-anchor=\"end\">{}</text>\
             <rect class=\"bar\" x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\" fill=\"{BAR_COLOUR}\"/>\
             <text x=\"{}\" y=\"{}\">{}</text>",
            num(c.left_px - 8.0),
            num(y + 15.0),
            limit.label(),
            num(c.left_px),
            num(y + 3.0),
            num(length.max(1.0)),
            num(row_px - 8.0),
            num(c.left_px + length.max(1.0) + 6.0),
            num(y + 15.0),
            count
        );
    }
    w!(
        out,
        "<path d=\"M{} {}V{}\" stroke=\"{LINE_COLOUR}\"/></svg>",
        num(c.left_px),
        num(c.top_px),
        num(c.height_px - c.bottom_px)
    );
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::limit::Limit;
    use crate::read::FeederInfo;
    use crate::report::BranchLine;
    use crate::stats::{WorstNode, histogram, summarise};

    fn feeder() -> FeederReport {
        let node = |id: &str, x: f64, kw: f64| WorstNode {
            node: id.into(),
            x: Some(x),
            y: Some(0.0),
            hosting_kw: kw,
            limit: Limit::Thermal,
            limit_element: Some("B<1>".into()),
            scenario: "peak & low".into(),
        };
        FeederReport {
            info: FeederInfo {
                id: "f\"1".into(),
                crs: Some("EPSG:32630".into()),
                ..FeederInfo::default()
            },
            worst: vec![node("a", 500.0, 50.0), node("b", 1000.0, 12_000.0)],
            overall: summarise(&[], &[]),
            per_scenario: Vec::new(),
            branches: vec![
                BranchLine {
                    branch: "B<1>".into(),
                    from: "h".into(),
                    to: "a".into(),
                    from_xy: Some((0.0, 0.0)),
                    to_xy: Some((500.0, 0.0)),
                },
                BranchLine {
                    branch: "B2".into(),
                    from: "a".into(),
                    to: "b".into(),
                    from_xy: Some((500.0, 0.0)),
                    to_xy: Some((1000.0, 0.0)),
                },
            ],
            head: Some("h".into()),
            n_baseline: 0,
        }
    }

    #[test]
    fn map_has_one_mark_per_node_escaped_text_and_a_scale_bar_in_metres() {
        let (svg, map) = feeder_map(&feeder());
        assert_eq!(map.kind, LayoutKind::Geographic);
        assert_eq!(svg.matches("class=\"node-mark\"").count(), 2);
        assert_eq!(svg.matches("class=\"head-mark\"").count(), 1);
        assert!(svg.contains("data-feeder=\"f&quot;1\""));
        assert!(svg.contains("at B&lt;1&gt; (peak &amp; low)"));
        assert!(!svg.contains("B<1>"));
        // The lowest capacity is drawn last (on top), in the first colour.
        let a = svg.find(BIN_COLOURS[0]).unwrap();
        let b = svg.find(BIN_COLOURS[7]).unwrap();
        assert!(b < a);
        // 1000 m over 664 px: 200 m is the smallest round length of at least 120 px.
        assert!(svg.contains(">200 m</text>"), "{svg}");
        assert_eq!(svg.matches("class=\"legend-bin\"").count(), N_BINS);
    }

    #[test]
    fn charts_draw_one_bar_per_nonempty_bin_and_criterion() {
        let h = histogram(&[50.0, 60.0, 700.0], 10);
        let svg = histogram_svg("f", &h);
        assert_eq!(svg.matches("class=\"bar\"").count(), 2);
        let mut counts = LimitCounts::default();
        counts.add(Limit::Thermal);
        counts.add(Limit::SearchMax);
        counts.add(Limit::SearchMax);
        let svg = limits_svg("f", &counts);
        assert_eq!(svg.matches("class=\"bar\"").count(), 2);
        assert!(svg.contains(">search ceiling</text>"));
    }

    #[test]
    fn numbers_are_short_and_never_negative_zero() {
        assert_eq!(num(12.0), "12");
        assert_eq!(num(12.26), "12.3");
        assert_eq!(num(-0.01), "0");
        assert_eq!(num(-3.5), "-3.5");
    }
}

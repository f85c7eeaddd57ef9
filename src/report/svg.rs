//! The report's charts as inline SVG: a confusion-matrix heat map and horizontal bars. Every
//! drawn number also sits in a `data-` attribute, so a test can compare the picture with the
//! JSON without reading pixels.

use crate::report::colormap::{text_on, viridis, viridis_hex};
use crate::report::html::escape;

/// Approximate width of one character of the report's 12 px sans-serif text (for layout only).
const CHAR_PX: f64 = 7.5;

/// One bar: label, value, and an optional swatch colour drawn before the label.
pub struct Bar {
    pub label: String,
    pub value: f64,
    pub swatch: Option<[u8; 3]>,
}

/// Horizontal bars of up to `bar_w` px for `max` (values above it are clipped), each
/// labelled with its value printed with `decimals` digits. `id` names the chart for styling
/// and tests.
pub fn bars(id: &str, bars: &[Bar], max: f64, bar_w: f64, decimals: usize, colour: &str) -> String {
    let label_w = bars
        .iter()
        .map(|b| b.label.chars().count())
        .max()
        .unwrap_or(4) as f64
        * CHAR_PX
        + if bars.iter().any(|b| b.swatch.is_some()) {
            28.0
        } else {
            10.0
        };
    let (row, value_w) = (22.0, 60.0);
    let width = label_w + bar_w + value_w + 8.0;
    let height = row * bars.len() as f64 + 4.0;
    let mut s = format!(
        r#"<svg id="{id}" class="chart" role="img" width="{width:.0}" height="{height:.0}" viewBox="0 0 {width:.0} {height:.0}" xmlns="http://www.w3.org/2000/svg">"#
    );
    for (i, b) in bars.iter().enumerate() {
        let y = 2.0 + i as f64 * row;
        let mut x = 0.0;
        if let Some([r, g, bl]) = b.swatch {
            s += &format!(
                r##"<rect x="0" y="{:.1}" width="12" height="12" rx="2" fill="#{r:02x}{g:02x}{bl:02x}" stroke="#0003"/>"##,
                y + 5.0
            );
            x = 18.0;
        }
        let len = if max > 0.0 {
            (b.value / max).clamp(0.0, 1.0) * bar_w
        } else {
            0.0
        };
        let label = escape(&b.label);
        s += &format!(
            r#"<text x="{x:.0}" y="{:.1}" class="bar-label">{label}</text>"#,
            y + 15.0
        );
        s += &format!(
            r#"<rect class="bar" data-label="{label}" data-value="{}" x="{label_w:.1}" y="{:.1}" width="{len:.1}" height="16" rx="3" fill="{colour}"><title>{label}: {:.prec$}</title></rect>"#,
            b.value,
            y + 3.0,
            b.value,
            prec = decimals
        );
        s += &format!(
            r#"<text x="{:.1}" y="{:.1}" class="bar-value">{:.prec$}</text>"#,
            label_w + len + 6.0,
            y + 15.0,
            b.value,
            prec = decimals
        );
    }
    s + "</svg>"
}

/// The confusion matrix `counts` (rows truth, columns prediction) as a heat map: each cell
/// coloured by its share of the true class (row-normalised, so rare classes are as readable
/// as common ones), printed as count and share when cells are large enough.
pub fn confusion_heat_map(names: &[String], counts: &[Vec<u64>]) -> String {
    let k = names.len();
    let cell = (560.0 / k.max(1) as f64).clamp(24.0, 72.0);
    let label_w = names
        .iter()
        .map(|n| n.chars().count().min(24))
        .max()
        .unwrap_or(4) as f64
        * CHAR_PX
        + 10.0;
    // Column labels are turned 45°, so they need about 0.7 × their length in height.
    let top = label_w * 0.72 + 28.0;
    let left = label_w + 24.0;
    let legend_h = 46.0;
    let width = left + cell * k as f64 + 16.0;
    let height = top + cell * k as f64 + legend_h;
    let short = |n: &str| {
        if n.chars().count() > 24 {
            format!("{}…", n.chars().take(23).collect::<String>())
        } else {
            n.to_string()
        }
    };
    let mut s = format!(
        r#"<svg id="confusion" class="chart" role="img" width="{width:.0}" height="{height:.0}" viewBox="0 0 {width:.0} {height:.0}" xmlns="http://www.w3.org/2000/svg">"#
    );
    s += &format!(
        r#"<text x="{:.1}" y="12" class="axis-title" text-anchor="middle">predicted class</text>"#,
        left + cell * k as f64 / 2.0
    );
    s += &format!(
        r#"<text transform="translate(12 {:.1}) rotate(-90)" class="axis-title" text-anchor="middle">true class</text>"#,
        top + cell * k as f64 / 2.0
    );
    for (i, n) in names.iter().enumerate() {
        let (name, full) = (escape(&short(n)), escape(n));
        let cx = left + (i as f64 + 0.5) * cell;
        s += &format!(
            r#"<text transform="translate({cx:.1} {:.1}) rotate(-45)" class="tick">{name}<title>{full}</title></text>"#,
            top - 6.0
        );
        let cy = top + (i as f64 + 0.5) * cell + 4.0;
        s += &format!(
            r#"<text x="{:.1}" y="{cy:.1}" class="tick" text-anchor="end">{name}<title>{full}</title></text>"#,
            left - 6.0
        );
    }
    let show_text = cell >= 40.0;
    for (t, row) in counts.iter().enumerate() {
        let total: u64 = row.iter().sum();
        for (p, &n) in row.iter().enumerate() {
            let share = if total > 0 {
                n as f64 / total as f64
            } else {
                0.0
            };
            let fill = if total > 0 {
                viridis_hex(share as f32)
            } else {
                "#eeeeee".into()
            };
            let (x, y) = (left + p as f64 * cell, top + t as f64 * cell);
            s += &format!(
                r#"<rect class="cell" data-truth="{t}" data-pred="{p}" data-count="{n}" x="{x:.1}" y="{y:.1}" width="{:.1}" height="{:.1}" fill="{fill}"><title>true {} → predicted {}: {n} px ({:.1} % of the true class)</title></rect>"#,
                cell - 1.0,
                cell - 1.0,
                escape(&names[t]),
                escape(&names[p]),
                100.0 * share
            );
            if show_text && total > 0 {
                let ink = text_on(viridis(share as f32));
                s += &format!(
                    r#"<text x="{:.1}" y="{:.1}" class="cell-text" style="fill:{ink}" text-anchor="middle">{}<tspan x="{:.1}" dy="13" class="cell-share">{:.0} %</tspan></text>"#,
                    x + cell / 2.0,
                    y + cell / 2.0 - 2.0,
                    compact(n),
                    x + cell / 2.0,
                    100.0 * share
                );
            }
        }
    }
    // Legend: the scale from 0 to 100 % of the true class.
    let ly = top + cell * k as f64 + 16.0;
    let lw = (cell * k as f64).clamp(160.0, 320.0);
    s += r#"<defs><linearGradient id="viridis-scale">"#;
    for i in 0..=8 {
        let t = i as f32 / 8.0;
        s += &format!(
            r#"<stop offset="{:.3}" stop-color="{}"/>"#,
            t,
            viridis_hex(t)
        );
    }
    s += "</linearGradient></defs>";
    s += &format!(
        r#"<rect x="{left:.1}" y="{ly:.1}" width="{lw:.1}" height="10" fill="url(#viridis-scale)"/><text x="{left:.1}" y="{:.1}" class="tick">0 %</text><text x="{:.1}" y="{:.1}" class="tick" text-anchor="end">100 % of the true class</text>"#,
        ly + 24.0,
        left + lw,
        ly + 24.0
    );
    s + "</svg>"
}

/// `1234567` → `1.2M`, `12345` → `12.3k`: counts that fit a heat-map cell.
fn compact(n: u64) -> String {
    match n {
        0..=9_999 => n.to_string(),
        10_000..=999_999 => format!("{:.1}k", n as f64 / 1e3),
        _ => format!("{:.1}M", n as f64 / 1e6),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn heat_map_holds_every_count_and_escapes_names() {
        let names = vec!["a<b".to_string(), "c&d".to_string()];
        let svg = confusion_heat_map(&names, &[vec![3, 1], vec![0, 20000]]);
        for c in ["3", "1", "0", "20000"] {
            assert!(svg.contains(&format!("data-count=\"{c}\"")));
        }
        assert!(svg.contains("a&lt;b") && svg.contains("c&amp;d"));
        assert!(!svg.contains("a<b"));
        assert!(svg.contains("20.0k"));
        let b = bars(
            "x",
            &[Bar {
                label: "<i>".into(),
                value: 0.5,
                swatch: Some([1, 2, 3]),
            }],
            1.0,
            100.0,
            3,
            "#000",
        );
        assert!(
            b.contains("data-value=\"0.5\"") && b.contains("&lt;i&gt;") && b.contains("#010203")
        );
    }
}

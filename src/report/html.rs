//! The report page's HTML: sections in reading order (headline figures, per class, folds,
//! confusion, features, out-of-bag, per image, pictures). No scripts and no external
//! resources; every name from data goes through [`escape`].

use std::fmt::Write;

use crate::report::svg::{bars, confusion_heat_map, Bar};
use crate::report::thumbnails::{RIGHT, WRONG};
use crate::report::{Report, OOB_CAVEAT};

/// Feature-importance bars shown (the rest are small and many).
const TOP_FEATURES: usize = 20;

/// Text as HTML/XML character data or attribute value: `& < > " '` become entities.
pub fn escape(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            c => out.push(c),
        }
    }
    out
}

fn hex(c: [u8; 3]) -> String {
    format!("#{:02x}{:02x}{:02x}", c[0], c[1], c[2])
}

/// A numeric cell: shown rounded, exact in `data-value` (empty when undefined).
fn num(v: Option<f64>, decimals: usize) -> String {
    match v {
        Some(x) => format!(r#"<td class="num" data-value="{x}">{x:.decimals$}</td>"#),
        None => r#"<td class="num none" data-value="">–</td>"#.into(),
    }
}

fn percent(v: Option<f64>) -> String {
    match v {
        Some(x) => format!(
            r#"<td class="num" data-value="{x}">{:.1} %</td>"#,
            100.0 * x
        ),
        None => r#"<td class="num none" data-value="">–</td>"#.into(),
    }
}

fn swatch(c: [u8; 3]) -> String {
    format!(
        r#"<span class="swatch" style="background:{}"></span>"#,
        hex(c)
    )
}

const STYLE: &str = r#"
:root{--ink:#1d2430;--muted:#5b6575;--line:#dfe3ea;--card:#fff;--bg:#f4f6f9;--accent:#3b528b}
*{box-sizing:border-box}
body{margin:0;background:var(--bg);color:var(--ink);font:14px/1.45 system-ui,-apple-system,"Segoe UI","DejaVu Sans",sans-serif}
main{max-width:1120px;margin:0 auto;padding:28px 24px 48px}
header{border-bottom:3px solid var(--accent);padding-bottom:14px;margin-bottom:20px}
h1{font-size:26px;margin:0 0 6px;letter-spacing:-.01em}
h2{font-size:17px;margin:0 0 12px}
.brand{font-weight:700;color:var(--accent);letter-spacing:.04em;text-transform:uppercase;font-size:12px}
dl.facts{display:grid;grid-template-columns:max-content 1fr;gap:2px 14px;margin:8px 0 0;color:var(--muted)}
dl.facts dt{font-weight:600}dl.facts dd{margin:0;word-break:break-all}
.cards{display:grid;grid-template-columns:repeat(auto-fit,minmax(170px,1fr));gap:12px;margin-bottom:20px}
.card{background:var(--card);border:1px solid var(--line);border-radius:10px;padding:12px 14px}
.card .label{color:var(--muted);font-size:12px;text-transform:uppercase;letter-spacing:.05em}
.card .value{font-size:28px;font-weight:650;font-variant-numeric:tabular-nums}
.card .sub{color:var(--muted);font-size:12px;font-variant-numeric:tabular-nums}
section{background:var(--card);border:1px solid var(--line);border-radius:10px;padding:16px 18px;margin-bottom:16px}
.row{display:flex;flex-wrap:wrap;gap:24px;align-items:flex-start}
.row>*{min-width:0}
table{border-collapse:collapse;font-variant-numeric:tabular-nums}
th,td{padding:5px 10px;border-bottom:1px solid var(--line);text-align:left;vertical-align:top}
th{font-size:12px;color:var(--muted);font-weight:600;text-transform:uppercase;letter-spacing:.04em}
td.num,th.num{text-align:right}
td.none{color:#9aa3b0}
tr.mean td{font-weight:650;border-top:2px solid var(--ink)}
.swatch{display:inline-block;width:12px;height:12px;border-radius:3px;margin-right:7px;vertical-align:-1px;border:1px solid #0003}
.note{background:#fff8e6;border-left:4px solid #e69f00;padding:8px 12px;border-radius:4px;margin:0 0 12px}
.muted{color:var(--muted)}
.chart text{font:12px system-ui,-apple-system,"Segoe UI","DejaVu Sans",sans-serif;fill:var(--ink)}
.chart .axis-title{font-weight:600;fill:var(--muted)}
.chart .cell-text{font-size:12px;font-weight:600}.chart .cell-share{font-size:10px;font-weight:400}
.thumbs{display:grid;grid-template-columns:repeat(5,max-content);gap:6px 10px;margin:4px 0 18px}
.thumbs figure{margin:0}.thumbs img{display:block;border-radius:4px;image-rendering:auto;border:1px solid var(--line)}
.thumbs figcaption{font-size:11px;color:var(--muted);text-transform:uppercase;letter-spacing:.05em;margin-top:2px}
h3{font-size:14px;margin:14px 0 4px;word-break:break-all}
.legend{display:flex;flex-wrap:wrap;gap:6px 18px;margin-bottom:12px;color:var(--muted);font-size:13px}
.scale{display:inline-block;width:120px;height:10px;border-radius:2px;vertical-align:middle;margin:0 6px}
footer{color:var(--muted);font-size:12px;text-align:center;margin-top:24px}
"#;

/// The whole page.
pub fn page(r: &Report) -> String {
    let m = &r.scores;
    let mut s = String::new();
    let version = env!("CARGO_PKG_VERSION");
    let _ = write!(
        s,
        "<!DOCTYPE html>\n<!-- {} {version} -->\n<html lang=\"en\"><head><meta charset=\"utf-8\"><meta name=\"viewport\" content=\"width=device-width,initial-scale=1\"><meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; img-src data:; style-src 'unsafe-inline'\"><title>{} · grove</title><style>{STYLE}</style></head><body><main>",
        crate::output_guard::SIGNATURE,
        escape(&r.title)
    );
    s += &header(r);
    s += &cards(r);
    if let Some(note) = m.boundary_note() {
        let _ = write!(s, r#"<p class="note">{}</p>"#, escape(&note));
    }
    s += &per_class(r);
    if r.crossval.is_some() {
        s += &folds(r);
    }
    let _ = write!(
        s,
        r#"<section id="confusion-section"><h2>Confusion matrix</h2><p class="muted">Rows are the true classes, columns the predicted ones; colour is the share of the true class (so each row reads on its own), the numbers are pixels.</p>{}</section>"#,
        confusion_heat_map(&m.classes, &m.confusion)
    );
    s += &features(r);
    s += &per_image(r);
    s += &pictures(r);
    let _ = writeln!(
        s,
        "<footer>{} {version} · {} · area shares: {}</footer></main></body></html>",
        crate::output_guard::SIGNATURE,
        escape(&r.title),
        escape(&m.area_fraction_basis)
    );
    s
}

fn header(r: &Report) -> String {
    let mut s = format!(
        r#"<header><div class="brand">grove report</div><h1>{}</h1>"#,
        escape(&r.title)
    );
    if !r.facts.is_empty() {
        s += r#"<dl class="facts">"#;
        for (k, v) in &r.facts {
            let _ = write!(s, "<dt>{}</dt><dd>{}</dd>", escape(k), escape(v));
        }
        s += "</dl>";
    }
    s + "</header>"
}

fn cards(r: &Report) -> String {
    let m = &r.scores;
    let sm = r.crossval.as_ref().map(|c| &c.summary);
    let card = |id: &str, label: &str, v: Option<f64>, sub: String| {
        let shown = v.map_or("–".into(), |x| format!("{x:.3}"));
        let raw = v.map_or(String::new(), |x| x.to_string());
        format!(
            r#"<div class="card" id="card-{id}"><div class="label">{label}</div><div class="value" data-value="{raw}">{shown}</div><div class="sub">{sub}</div></div>"#
        )
    };
    let over_folds = |v: Option<&crate::eval::crossval_report::MeanSd>| {
        v.map_or(String::new(), |x| format!("folds: {}", x.show()))
    };
    let pooled = if r.crossval.is_some() {
        "pooled held-out · "
    } else {
        ""
    };
    let mut s = r#"<div class="cards">"#.to_string();
    s += &card(
        "mean-iou",
        "mean IoU",
        Some(m.mean_iou),
        match sm {
            Some(sm) => over_folds(sm.mean_iou.as_ref()),
            None => "mean over classes".into(),
        },
    );
    s += &card(
        "pixel-accuracy",
        "pixel accuracy",
        Some(m.pixel_accuracy),
        match sm {
            Some(sm) => over_folds(sm.pixel_accuracy.as_ref()),
            None => "labelled pixels right".into(),
        },
    );
    s += &card(
        "boundary-f1",
        "boundary F1",
        m.boundary_f1,
        match sm {
            Some(sm) => over_folds(sm.boundary_f1.as_ref()),
            None => format!("within {} px", m.boundary_tolerance_px),
        },
    );
    s += &card(
        "class-accuracy",
        "mean class accuracy",
        Some(m.mean_class_accuracy),
        format!("{pooled}recall averaged over classes"),
    );
    let _ = write!(
        s,
        r#"<div class="card" id="card-pixels"><div class="label">labelled pixels</div><div class="value" data-value="{}">{}</div><div class="sub">{} images · {:.1} % of their pixels</div></div>"#,
        m.labelled_pixels,
        group_digits(m.labelled_pixels),
        m.images.len(),
        100.0 * m.labelled_fraction
    );
    s + "</div>"
}

/// `1234567` → `1 234 567` (thin spaces), readable in any locale.
fn group_digits(n: u64) -> String {
    let d = n.to_string();
    let mut out = String::new();
    for (i, c) in d.chars().enumerate() {
        if i > 0 && (d.len() - i).is_multiple_of(3) {
            out.push('\u{2009}');
        }
        out.push(c);
    }
    out
}

fn per_class(r: &Report) -> String {
    let m = &r.scores;
    let mut t = String::from(
        r#"<table id="per-class"><thead><tr><th>class</th><th class="num">IoU</th><th class="num">accuracy</th><th class="num">boundary F1</th><th class="num">true area</th><th class="num">predicted area</th></tr></thead><tbody>"#,
    );
    let mut iou_bars = Vec::new();
    for (name, colour) in &r.classes {
        let iou = m.per_class_iou[name].as_f64();
        let area = |k: &str| m.area_fraction[name][k].as_f64();
        let _ = write!(
            t,
            r#"<tr data-class="{}"><td>{}{}</td>{}{}{}{}{}</tr>"#,
            escape(name),
            swatch(*colour),
            escape(name),
            num(iou, 4),
            num(m.per_class_accuracy[name].as_f64(), 4),
            num(m.per_class_boundary_f1[name].as_f64(), 4),
            percent(area("true")),
            percent(area("predicted"))
        );
        if let Some(v) = iou {
            iou_bars.push(Bar {
                label: name.clone(),
                value: v,
                swatch: Some(*colour),
            });
        }
    }
    t += "</tbody></table>";
    format!(
        r#"<section id="classes"><h2>Per class</h2><div class="row"><div>{t}</div><div><h2>IoU per class</h2>{}</div></div><p class="muted">Areas are shares of the labelled pixels only (in the truth, and in the prediction at those pixels){}.</p></section>"#,
        bars("iou-bars", &iou_bars, 1.0, 220.0, 3, "#3b528b"),
        if m.labelled_fraction < crate::eval::score::SPARSE_LABELS {
            ": with scribble labels they describe the strokes, not the scene"
        } else {
            ""
        }
    )
}

fn folds(r: &Report) -> String {
    let Some(cv) = &r.crossval else {
        return String::new();
    };
    let mut s = format!(
        r#"<section id="folds-section"><h2>Folds</h2><p class="muted">{} folds by image{}, seed {}: each fold's images were scored by a model trained on the other folds only.</p><table id="folds"><thead><tr><th>fold</th><th>held-out images</th><th class="num">pixel accuracy</th><th class="num">mean IoU</th><th class="num">boundary F1</th><th class="num">out-of-bag</th></tr></thead><tbody>"#,
        cv.n_folds,
        if cv.leave_one_image_out {
            " (leave-one-image-out: fewer images than folds asked for)"
        } else {
            ""
        },
        cv.seed
    );
    for f in &cv.folds {
        let _ = write!(
            s,
            r#"<tr data-fold="{}"><td>{}</td><td>{}</td>{}{}{}{}</tr>"#,
            f.fold,
            f.fold,
            escape(&f.images.join(", ")),
            num(f.pixel_accuracy, 4),
            num(f.mean_iou, 4),
            num(f.boundary_f1, 4),
            num(f.oob_accuracy, 4)
        );
    }
    let ms = |v: &Option<crate::eval::crossval_report::MeanSd>| match v {
        Some(x) => format!(
            r#"<td class="num" data-value="{}" data-sd="{}">{}</td>"#,
            x.mean,
            x.sd.map_or(String::new(), |v| v.to_string()),
            escape(&x.show())
        ),
        None => r#"<td class="num none" data-value="">–</td>"#.into(),
    };
    let sm = &cv.summary;
    let _ = write!(
        s,
        r#"<tr class="mean"><td colspan="2">mean ± sd</td>{}{}{}{}</tr></tbody></table>"#,
        ms(&sm.pixel_accuracy),
        ms(&sm.mean_iou),
        ms(&sm.boundary_f1),
        ms(&sm.oob_accuracy)
    );
    s += r#"<h2 style="margin-top:16px">IoU per class and fold</h2><table id="fold-classes"><thead><tr><th>class</th>"#;
    for f in &cv.folds {
        let _ = write!(s, r#"<th class="num">fold {}</th>"#, f.fold);
    }
    s += r#"<th class="num">mean ± sd</th></tr></thead><tbody>"#;
    for ((name, colour), m) in r.classes.iter().zip(&sm.class_iou) {
        let _ = write!(
            s,
            r#"<tr data-class="{}"><td>{}{}</td>"#,
            escape(name),
            swatch(*colour),
            escape(name)
        );
        for f in &cv.folds {
            s += &num(f.per_class_iou[name].as_f64(), 3);
        }
        s += &ms(m);
        s += "</tr>";
    }
    s + "</tbody></table></section>"
}

fn features(r: &Report) -> String {
    let mut s = String::from(r#"<section id="model-section"><div class="row">"#);
    if !r.importances.is_empty() {
        let top: Vec<Bar> = r
            .importances
            .iter()
            .take(TOP_FEATURES)
            .map(|(n, v)| Bar {
                label: n.clone(),
                value: *v,
                swatch: None,
            })
            .collect();
        let max = top.first().map_or(1.0, |b| b.value).max(1e-12);
        let _ = write!(
            s,
            r#"<div><h2>Most informative features</h2><p class="muted">Impurity importance in the forest{}, top {} of {}.</p>{}</div>"#,
            if r.crossval.is_some() {
                ", averaged over the fold models"
            } else {
                ""
            },
            top.len(),
            r.importances.len(),
            bars("importance-bars", &top, max, 320.0, 3, "#21918c")
        );
    }
    s += r#"<div id="oob" style="max-width:420px"><h2>Out-of-bag estimate</h2>"#;
    match r.oob_accuracy {
        Some(v) => {
            let _ = write!(
                s,
                r#"<p><span class="big" data-value="{v}" style="font-size:24px;font-weight:650">{v:.3}</span> <span class="muted">{}</span></p>"#,
                if r.crossval.is_some() {
                    "mean over the fold models"
                } else {
                    "of the model"
                }
            );
        }
        None => s += r#"<p class="muted">Not recorded in the model.</p>"#,
    }
    let _ = write!(
        s,
        r#"<p class="note">{}</p><p class="muted">Held-out mean IoU here: {:.3}.</p></div></div></section>"#,
        escape(OOB_CAVEAT),
        r.scores.mean_iou
    );
    s
}

fn per_image(r: &Report) -> String {
    let m = &r.scores;
    let mut s = String::from(
        r#"<section id="per-image-section"><h2>Per image</h2><table id="per-image"><thead><tr><th>image</th><th class="num">pixel accuracy</th><th class="num">mean IoU</th><th class="num">boundary F1</th><th class="num">labelled pixels</th></tr></thead><tbody>"#,
    );
    for i in &m.per_image {
        let _ = write!(
            s,
            r#"<tr data-image="{}"><td>{}</td>{}{}{}<td class="num" data-value="{}">{}</td></tr>"#,
            escape(&i.image),
            escape(&i.image),
            num(i.pixel_accuracy, 4),
            num(i.mean_iou, 4),
            num(i.boundary_f1, 4),
            i.labelled_pixels,
            group_digits(i.labelled_pixels)
        );
    }
    s + "</tbody></table></section>"
}

fn pictures(r: &Report) -> String {
    let t = &r.thumbnails;
    if t.rows.is_empty() {
        return String::new();
    }
    let mut s = String::from(r#"<section id="images"><h2>Pictures</h2><div class="legend">"#);
    for (name, colour) in &r.classes {
        let _ = write!(s, "<span>{}{}</span>", swatch(*colour), escape(name));
    }
    let _ = write!(
        s,
        r#"<span>{}right {}wrong (labelled pixels)</span><span>uncertainty (1 − margin): sure<span class="scale" style="background:linear-gradient(90deg{})"></span>unsure</span><span>dark: unlabelled</span></div>"#,
        swatch(RIGHT),
        swatch(WRONG),
        (0..=8)
            .map(|i| format!(",{}", crate::report::colormap::viridis_hex(i as f32 / 8.0)))
            .collect::<String>()
    );
    for row in &t.rows {
        let name = escape(&row.image);
        let _ = write!(
            s,
            r#"<h3>{name}</h3><div class="thumbs" data-image="{name}">"#
        );
        for (what, uri) in [
            ("image", &row.photo),
            ("truth", &row.truth),
            ("prediction", &row.prediction),
            ("errors", &row.errors),
            ("uncertainty", &row.uncertainty),
        ] {
            let _ = write!(
                s,
                r#"<figure><img src="{uri}" width="{}" height="{}" alt="{what} of {name}"><figcaption>{what}</figcaption></figure>"#,
                row.width, row.height
            );
        }
        s += "</div>";
    }
    if t.omitted > 0 {
        let _ = write!(
            s,
            r#"<p class="muted">{} more images were scored (see the table above) but are not pictured, to keep this file small.</p>"#,
            t.omitted
        );
    }
    s + "</section>"
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn escapes_markup_and_quotes() {
        assert_eq!(
            escape(r#"<img src=x onerror="a('b')">&"#),
            "&lt;img src=x onerror=&quot;a(&#39;b&#39;)&quot;&gt;&amp;"
        );
        assert_eq!(group_digits(1234567), "1\u{2009}234\u{2009}567");
        assert_eq!(group_digits(12), "12");
    }
}

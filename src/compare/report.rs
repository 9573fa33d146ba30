//! The `--report` page: one self-contained HTML file, inline CSS and SVG
//! charts drawn here, no script, no external resource of any kind.

use std::fmt::Write as _;

use super::table::{discrimination_cells, fixed, model_cells, p_value, pct};
use super::{fmt_count, fmt_num, Comparison, IndexResult, Model};

/// Series colours: eight hues that stay apart under the common forms of
/// colour-vision deficiency (blue against orange rather than red against
/// green; light and dark members alternate), each dark enough on white.
const PALETTE: &[&str] = &[
    "#2458a6", "#de7c00", "#1a1a1a", "#b43c8c", "#3f9fd6", "#8a6200", "#6b6b6b", "#1f8f72",
];
/// Line styles, varied with the colour (3 styles against 8 colours: 24
/// distinct pairs), so that no two of the first 24 series look alike even
/// without colour.
const DASHES: &[&str] = &["", "7 3", "2 2.5"];

fn colour(i: usize) -> &'static str {
    PALETTE[i % PALETTE.len()]
}

fn dash(i: usize) -> &'static str {
    DASHES[i % DASHES.len()]
}

/// A short line sample in series i's colour and style, for legends.
fn line_key(i: usize) -> String {
    format!(
        r#"<svg class="linekey" width="30" height="10" viewBox="0 0 30 10" aria-hidden="true"><line x1="1" y1="5" x2="29" y2="5" stroke="{}" stroke-width="2.5" stroke-dasharray="{}"/></svg>"#,
        colour(i),
        dash(i)
    )
}

/// Escapes text for HTML content and attribute values.
fn esc(s: &str) -> String {
    let mut o = String::with_capacity(s.len());
    for ch in s.chars() {
        match ch {
            '&' => o.push_str("&amp;"),
            '<' => o.push_str("&lt;"),
            '>' => o.push_str("&gt;"),
            '"' => o.push_str("&quot;"),
            '\'' => o.push_str("&#39;"),
            c => o.push(c),
        }
    }
    o
}

const CSS: &str = r#"
:root { --ink:#1d2430; --muted:#5d6675; --line:#d9dde3; --soft:#f4f6f8; --accent:#1b6f8a; }
* { box-sizing: border-box; }
body { margin:0; color:var(--ink); background:#fff;
  font: 15px/1.5 system-ui, -apple-system, "Segoe UI", Roboto, "Helvetica Neue", Arial, sans-serif; }
main { max-width: 1120px; margin: 0 auto; padding: 28px 32px 48px; }
h1 { font-size: 26px; margin: 0 0 4px; letter-spacing: -0.01em; }
h2 { font-size: 19px; margin: 36px 0 10px; padding-bottom: 6px; border-bottom: 2px solid var(--ink); }
h3 { font-size: 15px; margin: 18px 0 6px; }
p.lede { color: var(--muted); margin: 0 0 18px; }
.cards { display:flex; flex-wrap:wrap; gap:12px; margin: 14px 0 6px; }
.card { background:var(--soft); border-radius:6px; padding:10px 16px; min-width:150px; }
.card .v { font-size:22px; font-weight:650; font-variant-numeric: tabular-nums; }
.card .k { font-size:12px; color:var(--muted); text-transform: uppercase; letter-spacing: .04em; }
.caution { border-left: 5px solid #c58f12; background:#fbf6ea; padding: 10px 16px; margin: 18px 0; border-radius: 0 6px 6px 0; }
.caution strong { display:block; margin-bottom:2px; }
.notes { border-left: 5px solid #7b4b94; background:#f6f2f9; padding: 8px 16px 8px 34px; border-radius: 0 6px 6px 0; list-style: disc; }
.notes li { margin: 3px 0; }
table { border-collapse: collapse; font-variant-numeric: tabular-nums; margin: 6px 0 12px; font-size: 14px; }
th, td { padding: 4px 10px; border-bottom: 1px solid var(--line); text-align: right; vertical-align: top; }
th { font-weight: 600; border-bottom: 2px solid #9aa3ae; background: #fafbfc; }
th:first-child, td:first-child, td.l, th.l { text-align: left; }
td.sub { color: var(--muted); }
tr.first td { border-top: 2px solid #c3c9d1; }
.key { display:inline-block; width:12px; height:12px; border-radius:2px; margin-right:6px; vertical-align:-1px; }
.linekey { margin-right:6px; vertical-align:1px; }
td { white-space: nowrap; }
td.l { white-space: normal; }
@media (max-width: 900px) { main { padding: 20px 14px 36px; } table { font-size: 12.5px; } th, td { padding: 3px 6px; } }
.scroll { max-width:100%; overflow-x:auto; }
.panels { display:grid; grid-template-columns: repeat(auto-fill, minmax(300px, 1fr)); gap: 14px 18px; }
.panels figure div.t { font-weight:600; font-size:13px; }
.row { display:flex; flex-wrap:nowrap; gap: 22px; align-items:flex-start; }
.row > figure { flex: none; }
.row > div { flex: 1 1 auto; min-width: 0; }
.row table { font-size: 13px; }
@media (max-width: 980px) { .row { flex-wrap: wrap; } }
.grid { display:grid; grid-template-columns: repeat(auto-fill, minmax(320px, 1fr)); gap: 18px 24px; }
figure { margin: 0; }
figcaption { font-size: 13px; color: var(--muted); margin-top: 2px; }
svg text { font-family: system-ui, -apple-system, "Segoe UI", Roboto, Arial, sans-serif; fill: var(--ink); }
svg .axis { stroke:#6b7480; stroke-width:1; }
svg .gridline { stroke:#e6e9ed; stroke-width:1; }
svg .tick { font-size: 11px; fill:#4d5562; }
svg .title { font-size: 13px; font-weight: 600; }
details { margin: 6px 0 16px; }
summary { cursor: pointer; color: var(--accent); }
footer { margin-top: 40px; font-size: 13px; color: var(--muted); border-top: 1px solid var(--line); padding-top: 10px; }
code { font-family: ui-monospace, "SFMono-Regular", Menlo, Consolas, monospace; font-size: 13px; background: var(--soft); padding: 0 3px; border-radius: 3px; }
@media print { main { max-width: none; } h2 { break-after: avoid; } figure, table { break-inside: avoid; } }
"#;

/// The ROC curves of every index on one plot, with the chance diagonal.
fn roc_svg(c: &Comparison) -> String {
    let (size, left, top, right, bottom) = (380.0, 50.0, 12.0, 12.0, 42.0);
    let plot = size - left - right;
    let plot_h = size - top - bottom;
    let x = |v: f64| left + v * plot;
    let y = |v: f64| top + (1.0 - v) * plot_h;
    let mut s = String::new();
    let _ = write!(
        s,
        r#"<svg xmlns="http://www.w3.org/2000/svg" width="{size}" height="{size}" viewBox="0 0 {size} {size}" role="img" aria-label="ROC curves of every index">"#
    );
    for t in 0..=5 {
        let v = t as f64 / 5.0;
        let _ = write!(
            s,
            r#"<line class="gridline" x1="{:.1}" y1="{:.1}" x2="{:.1}" y2="{:.1}"/><line class="gridline" x1="{:.1}" y1="{:.1}" x2="{:.1}" y2="{:.1}"/>"#,
            x(v),
            y(0.0),
            x(v),
            y(1.0),
            x(0.0),
            y(v),
            x(1.0),
            y(v)
        );
        let _ = write!(
            s,
            r#"<text class="tick" x="{:.1}" y="{:.1}" text-anchor="middle">{}</text><text class="tick" x="{:.1}" y="{:.1}" text-anchor="end">{}</text>"#,
            x(v),
            y(0.0) + 16.0,
            fmt_num(v),
            x(0.0) - 6.0,
            y(v) + 4.0,
            fmt_num(v)
        );
    }
    let _ = write!(
        s,
        r#"<rect x="{left}" y="{top}" width="{plot}" height="{plot_h}" fill="none" class="axis"/>"#
    );
    let _ = write!(
        s,
        r##"<line x1="{:.1}" y1="{:.1}" x2="{:.1}" y2="{:.1}" stroke="#9aa3ae" stroke-width="1.2" stroke-dasharray="5 4"/>"##,
        x(0.0),
        y(0.0),
        x(1.0),
        y(1.0)
    );
    for (i, ix) in c.indices.iter().enumerate() {
        if ix.roc.is_empty() {
            continue;
        }
        // Thin very long curves (the shape is kept: every k-th point and the
        // last one).
        let step = (ix.roc.len() / 1500).max(1);
        let mut d = String::new();
        for (j, p) in ix.roc.iter().enumerate() {
            if j % step != 0 && j != ix.roc.len() - 1 {
                continue;
            }
            let _ = write!(
                d,
                "{}{:.1},{:.1}",
                if d.is_empty() { "M" } else { "L" },
                x(p[0]),
                y(p[1])
            );
        }
        let _ = write!(
            s,
            r#"<path d="{d}" fill="none" stroke="{}" stroke-width="2" stroke-dasharray="{}" stroke-linejoin="round"><title>{}</title></path>"#,
            colour(i),
            dash(i),
            esc(&ix.name)
        );
    }
    // The chance label last, below the diagonal and on a white halo, so that
    // no curve is drawn over it.
    let _ = write!(
        s,
        r##"<text class="tick" x="{:.1}" y="{:.1}" text-anchor="middle" transform="rotate(-45 {:.1} {:.1})" stroke="#fff" stroke-width="4" paint-order="stroke" stroke-linejoin="round">chance (c = 0.5)</text>"##,
        x(0.8),
        y(0.8) + 14.0,
        x(0.8),
        y(0.8) + 14.0
    );
    let _ = write!(
        s,
        r#"<text class="tick" x="{:.1}" y="{:.1}" text-anchor="middle">false-positive rate (1 − specificity)</text>"#,
        left + plot / 2.0,
        size - 8.0
    );
    let _ = write!(
        s,
        r#"<text class="tick" x="14" y="{:.1}" text-anchor="middle" transform="rotate(-90 14 {:.1})">true-positive rate (sensitivity)</text>"#,
        top + plot_h / 2.0,
        top + plot_h / 2.0
    );
    s.push_str("</svg>");
    s
}

/// Histogram of one index's scores.
fn histogram_svg(i: usize, ix: &IndexResult) -> String {
    let (w, h, left, top, right, bottom) = (320.0, 180.0, 46.0, 12.0, 10.0, 40.0);
    let pw = w - left - right;
    let ph = h - top - bottom;
    let bins = &ix.histogram;
    let max = bins.iter().map(|b| b.count).max().unwrap_or(0).max(1) as f64;
    let n = ix.distribution.n.max(1) as f64;
    let mut s = String::new();
    let _ = write!(
        s,
        r#"<svg xmlns="http://www.w3.org/2000/svg" width="{w}" height="{h}" viewBox="0 0 {w} {h}" role="img" aria-label="histogram of {}">"#,
        esc(&ix.name)
    );
    // Share-of-units gridlines at round percentages.
    let top_share = max / n;
    let step = super::nice_width(top_share / 4.0);
    let mut g = step;
    while g <= top_share * 1.0001 {
        let yy = top + ph - g / top_share * ph;
        gridline(&mut s, left, pw, yy, &pct_short(g));
        g += step;
    }
    let nb = bins.len().max(1) as f64;
    let bw = pw / nb;
    for b in bins.iter() {
        let k = (b.from - bins[0].from) / (bins[0].to - bins[0].from);
        let bh = b.count as f64 / max * ph;
        let _ = write!(
            s,
            r#"<rect x="{:.2}" y="{:.2}" width="{:.2}" height="{:.2}" fill="{}"><title>{} to {}: {} units ({})</title></rect>"#,
            left + k * bw + bw * 0.08,
            top + ph - bh,
            (bw * 0.84).max(0.6),
            bh,
            colour(i),
            fmt_num(b.from),
            fmt_num(b.to),
            fmt_count(b.count),
            pct(b.count as f64 / n)
        );
    }
    let _ = write!(
        s,
        r#"<line class="axis" x1="{left}" y1="{:.1}" x2="{:.1}" y2="{:.1}"/>"#,
        top + ph,
        left + pw,
        top + ph
    );
    // x labels: about six, at bin starts (bin centres for one-point bins).
    let unit = bins.first().is_some_and(|b| b.to - b.from == 1.0);
    let every = (bins.len() as f64 / 6.0).ceil().max(1.0) as usize;
    // Labelled bins are counted from the bin starting at 0, when there is
    // one, so that 0 always has its tick.
    let zero = bins.iter().position(|b| b.from == 0.0).unwrap_or(0);
    for (j, b) in bins.iter().enumerate() {
        if j.abs_diff(zero) % every != 0 {
            continue;
        }
        let xx = if unit {
            left + (j as f64 + 0.5) * bw
        } else {
            left + j as f64 * bw
        };
        let _ = write!(
            s,
            r#"<text class="tick" x="{xx:.1}" y="{:.1}" text-anchor="middle">{}</text>"#,
            top + ph + 14.0,
            fmt_num(b.from)
        );
    }
    let _ = write!(
        s,
        r#"<text class="tick" x="{:.1}" y="{:.1}" text-anchor="middle">score</text>"#,
        left + pw / 2.0,
        h - 6.0
    );
    s.push_str("</svg>");
    s
}

fn pct_short(share: f64) -> String {
    let v = 100.0 * share;
    if v >= 10.0 || v == v.round() {
        format!("{v:.0}%")
    } else {
        format!("{}%", fmt_num(v))
    }
}

/// Most conditions drawn per list (all are in the table below the chart).
const MAX_BARS: usize = 40;

/// Horizontal prevalence bars of a list's conditions (those present, most
/// frequent first).
fn prevalence_svg(ix: &IndexResult, colour: &str) -> String {
    let mut rows: Vec<&super::Prevalence> = ix.prevalence.iter().filter(|p| p.count > 0).collect();
    rows.sort_by(|a, b| b.count.cmp(&a.count).then_with(|| a.key.cmp(&b.key)));
    rows.truncate(MAX_BARS);
    let label_w = 330.0;
    let bar_w = 560.0;
    let value_w = 110.0;
    let row_h = 19.0;
    let top = 22.0;
    let w = label_w + bar_w + value_w;
    let h = top + row_h * rows.len() as f64 + 8.0;
    let max = rows.first().map_or(1.0, |p| p.share.max(1e-12));
    let mut s = String::new();
    let _ = write!(
        s,
        r#"<svg xmlns="http://www.w3.org/2000/svg" width="{w}" height="{h}" viewBox="0 0 {w} {h}" role="img" aria-label="condition prevalence, {}">"#,
        esc(&ix.list)
    );
    // Gridlines at round shares.
    let step = super::nice_width(max / 5.0);
    let mut g = 0.0;
    while g <= max * 1.0001 {
        let xx = label_w + g / max * bar_w;
        let _ = write!(
            s,
            r#"<line class="gridline" x1="{xx:.1}" y1="{:.1}" x2="{xx:.1}" y2="{:.1}"/><text class="tick" x="{xx:.1}" y="14" text-anchor="middle">{}</text>"#,
            top - 4.0,
            h - 6.0,
            pct_short(g)
        );
        g += step;
    }
    for (j, p) in rows.iter().enumerate() {
        let yy = top + j as f64 * row_h;
        let mut label = p.label.clone();
        if label.chars().count() > 46 {
            label = label.chars().take(44).collect::<String>() + "…";
        }
        let _ = write!(
            s,
            r#"<text x="{:.1}" y="{:.1}" text-anchor="end" font-size="12">{}</text>"#,
            label_w - 8.0,
            yy + 13.0,
            esc(&label)
        );
        let bw = (p.share / max * bar_w).max(1.0);
        let _ = write!(
            s,
            r#"<rect x="{label_w}" y="{:.1}" width="{bw:.1}" height="{:.1}" fill="{colour}" rx="2"><title>{} ({}): {} units, {}</title></rect>"#,
            yy + 3.0,
            row_h - 6.0,
            esc(&p.label),
            esc(&p.key),
            p.count,
            pct(p.share)
        );
        let _ = write!(
            s,
            r#"<text class="tick" x="{:.1}" y="{:.1}">{} · {}</text>"#,
            label_w + bw + 6.0,
            yy + 13.0,
            pct(p.share),
            fmt_count(p.count)
        );
    }
    s.push_str("</svg>");
    s
}

fn model_table_rows(label: &str, m: &Model, clustered: bool, out: &mut String) {
    for (j, cells) in model_cells(label, m, clustered, "–").iter().enumerate() {
        out.push_str(if j == 0 {
            "<tr class=\"first\">"
        } else {
            "<tr>"
        });
        for (k, cell) in cells.iter().enumerate() {
            // The label and the term are text; the rest numbers or a dash.
            let _ = match k {
                0 => write!(out, "<td>{}</td>", esc(cell)),
                1 => write!(out, "<td class=\"l\">{}</td>", esc(cell)),
                _ => write!(out, "<td>{cell}</td>"),
            };
        }
        out.push_str("</tr>");
    }
}

/// The comparison as one self-contained HTML page.
pub fn html_report(c: &Comparison) -> String {
    let mut h = String::new();
    let u = &c.units;
    let _ = write!(
        h,
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">\
         <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\
         <title>Index comparison: {}</title><style>{CSS}</style></head><body><main>",
        esc(&c.outcome)
    );
    let _ = write!(
        h,
        "<h1>How the indices compare on this extract</h1><p class=\"lede\">Outcome <code>{}</code> · {} index specification{} · {}{} · morbus {}</p>",
        esc(&c.outcome),
        c.indices.len(),
        if c.indices.len() == 1 { "" } else { "s" },
        match &c.lookback {
            None => "no lookback".to_string(),
            Some(l) if l == "all" => "lookback over the whole history".to_string(),
            Some(l) if l.parse::<u32>().is_ok() => format!("lookback {} days", esc(l)),
            Some(l) => format!("lookback {} (days)", esc(l)),
        } + match c.window.as_deref() {
            Some("earlier-only") => ", earlier episodes only",
            _ => "",
        },
        if c.hierarchy { "" } else { " · hierarchies off" },
        esc(&c.morbus_version)
    );
    h.push_str("<div class=\"cards\">");
    for (k, v) in [
        ("units read", fmt_count(u.read)),
        ("units analysed", fmt_count(u.analysed)),
        ("outcome 1", fmt_count(u.events)),
        ("outcome share", pct(u.event_share)),
    ] {
        let _ = write!(
            h,
            "<div class=\"card\"><div class=\"v\">{}</div><div class=\"k\">{}</div></div>",
            esc(&v),
            k
        );
    }
    h.push_str("</div>");
    let left = u.left_out();
    h.push_str("<p>");
    if !left.is_empty() {
        let _ = write!(h, "Left out: {}. ", esc(&left.join(", ")));
    }
    if c.adjustment.is_empty() {
        h.push_str("Models: the outcome on each score alone.");
    } else {
        let names: Vec<String> = c.adjustment.iter().map(|t| esc(&t.name)).collect();
        let _ = write!(
            h,
            "Models: the outcome on each score plus {}.",
            names.join(", ")
        );
        let mut seen: Vec<&str> = Vec::new();
        for t in &c.adjustment {
            if let Some(r) = &t.reference {
                if !seen.contains(&t.column.as_str()) {
                    seen.push(&t.column);
                    let _ = write!(
                        h,
                        " <code>{}</code>: reference level <code>{}</code>.",
                        esc(&t.column),
                        esc(r)
                    );
                }
            }
        }
    }
    for sp in &c.splines {
        let _ = write!(
            h,
            " <code>{}</code>: restricted cubic spline with {} knots at {} (quantiles {}; Harrell 2015), terms {}.",
            esc(&sp.column),
            sp.knots.len(),
            sp.knots.iter().map(|v| fmt_num(*v)).collect::<Vec<_>>().join(", "),
            sp.quantiles.iter().map(|v| fmt_num(*v)).collect::<Vec<_>>().join(", "),
            esc(&sp.terms.join(", "))
        );
    }
    if let Some(cl) = &c.clusters {
        let _ = write!(
            h,
            " Clusters: <code>{}</code>, {} clusters (largest {} units).",
            esc(&cl.column),
            fmt_count(cl.clusters as u64),
            fmt_count(cl.largest as u64)
        );
    }
    h.push_str("</p>");
    let _ = write!(
        h,
        "<div class=\"caution\"><strong>For population-level research only</strong>{}</div>",
        esc(&c.caution)
    );

    // Discrimination.
    h.push_str("<h2>Discrimination</h2><div class=\"row\"><figure>");
    h.push_str(&roc_svg(c));
    h.push_str("<figcaption>Empirical ROC curve of each score; dashed grey: chance.</figcaption></figure><div>");
    let clustered = c.clusters.is_some();
    let _ = write!(
        h,
        "<table><thead><tr><th>index</th><th>c-statistic</th><th>95% CI</th>{}<th>model c</th><th>model AIC</th><th>added value, χ² (1 df)</th></tr></thead><tbody>",
        if clustered { "<th>95% CI (clusters)</th>" } else { "" }
    );
    for (i, ix) in c.indices.iter().enumerate() {
        let lr = ix.added_value.as_ref().map_or("–".into(), |a| {
            format!("{} (p {})", fixed(a.statistic, 1), p_value(a.p_value))
        });
        let _ = write!(h, "<tr><td>{}{}</td>", line_key(i), esc(&ix.name));
        for cell in discrimination_cells(ix, clustered, "–", " – ") {
            let _ = write!(h, "<td>{cell}</td>");
        }
        let _ = write!(h, "<td>{lr}</td></tr>");
    }
    if let Some(m) = &c.adjustment_model {
        let _ = write!(
            h,
            "<tr><td class=\"sub\">adjustment terms alone</td><td>–</td><td>–</td>{}<td>{}</td><td>{}</td><td>–</td></tr>",
            if clustered { "<td>–</td>" } else { "" },
            fixed(m.c_statistic, 3),
            fixed(m.aic, 1)
        );
    }
    let _ = write!(
        h,
        "</tbody></table><p class=\"lede\" style=\"font-size:13px\">95% confidence intervals by the method of DeLong et al. (1988). The c-statistic is the chance that a unit with the outcome scores higher than one without (ties count half). The model columns refer to the logistic model of the outcome on the score and the adjustment terms; a lower AIC is a better fit for the same units. Added value: likelihood-ratio test of the model with the score against the model without it (the adjustment terms alone, or the intercept).{}</p></div></div>",
        if clustered {
            " Clustered intervals: Obuchowski (1997), allowing for units of one cluster being alike; the likelihood-ratio test assumes independent units."
        } else {
            ""
        }
    );

    if let Some(cv) = &c.cross_validation {
        out_of_sample_html(c, cv, &mut h);
    }

    if !c.pairs.is_empty() {
        let pc = &c.pairs_compared;
        let _ = write!(
            h,
            "<h3>Pairs of indices</h3><p class=\"lede\" style=\"font-size:13px\">{}</p>",
            match &pc.reference {
                Some(r) => format!(
                    "Each index against the reference <code>{}</code>: {} tests (all pairs would be {}).",
                    esc(r),
                    pc.tests,
                    pc.tests_if_all_pairs
                ),
                None => format!(
                    "All pairs: {} tests; p-values are not adjusted for their number.",
                    pc.tests
                ),
            }
        );
        let _ = write!(
            h,
            "<table><thead><tr><th>a</th><th class=\"l\">b</th><th>c(a) − c(b)</th><th>95% CI</th><th>p (DeLong)</th>{}<th>Spearman ρ</th></tr></thead><tbody>",
            if clustered { "<th>p (clusters)</th>" } else { "" }
        );
        for p in &c.pairs {
            let (d, ci, pv) =
                p.delong
                    .as_ref()
                    .map_or(("–".into(), "–".into(), "–".into()), |t| {
                        (
                            fixed(t.difference, 4),
                            format!("{} – {}", fixed(t.ci95[0], 4), fixed(t.ci95[1], 4)),
                            p_value(t.p_value),
                        )
                    });
            let cp = if clustered {
                format!(
                    "<td>{}</td>",
                    p.delong
                        .as_ref()
                        .and_then(|t| t.cluster.as_ref())
                        .map_or("–".into(), |t| p_value(t.p_value))
                )
            } else {
                String::new()
            };
            let _ = write!(
                h,
                "<tr><td>{}</td><td class=\"l\">{}</td><td>{d}</td><td>{ci}</td><td>{pv}</td>{cp}<td>{}</td></tr>",
                esc(&p.a),
                esc(&p.b),
                p.spearman.map_or("–".into(), |r| fixed(r, 3))
            );
        }
        h.push_str("</tbody></table>");
    }

    if let Some(p) = &c.providers {
        providers_html(p, &mut h);
    }

    // Models.
    let _ = write!(
        h,
        "<h2>Logistic models</h2><table><thead><tr><th>model</th><th class=\"l\">term</th><th>estimate</th><th>SE</th>{}<th>odds ratio</th><th>p</th>{}<th>c</th><th>AIC</th></tr></thead><tbody>",
        if clustered { "<th>cluster SE</th>" } else { "" },
        if clustered { "<th>cluster p</th>" } else { "" }
    );
    if let Some(m) = &c.adjustment_model {
        model_table_rows("adjustment only", m, clustered, &mut h);
    }
    for ix in &c.indices {
        match &ix.model {
            Some(m) => model_table_rows(&ix.name, m, clustered, &mut h),
            None => {
                let _ = write!(
                    h,
                    "<tr class=\"first\"><td>{}</td><td class=\"l\" colspan=\"{}\">no model (see notes)</td></tr>",
                    esc(&ix.name),
                    if clustered { 9 } else { 7 }
                );
            }
        }
    }
    let _ = write!(
        h,
        "</tbody></table><p class=\"lede\">Estimates are log odds ratios per point of the score (or per unit of an adjustment term); standard errors are Wald standard errors from the inverse information matrix.{}</p>",
        if clustered {
            " Cluster SE: cluster-robust (sandwich) standard errors with the small-sample factor G/(G − 1) · (N − 1)/(N − K)."
        } else {
            ""
        }
    );

    // Distributions.
    h.push_str("<h2>Score distributions</h2><table><thead><tr><th>index</th><th>mean</th><th>SD</th><th>min</th><th>Q1</th><th>median</th><th>Q3</th><th>max</th><th>score 0</th><th>distinct</th></tr></thead><tbody>");
    for ix in &c.indices {
        let d = &ix.distribution;
        let qs = super::table::quantiles(d);
        let _ = write!(
            h,
            "<tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
            esc(&ix.name),
            fixed(d.mean, 2),
            d.sd.map_or("–".into(), |s| fixed(s, 2)),
            qs[0],
            qs[1],
            qs[2],
            qs[3],
            qs[4],
            pct(d.zero_share),
            d.distinct
        );
    }
    h.push_str("</tbody></table><div class=\"grid\">");
    for (i, ix) in c.indices.iter().enumerate() {
        let _ = write!(
            h,
            "<figure><div class=\"title\" style=\"font-weight:600;font-size:14px\"><span class=\"key\" style=\"background:{}\"></span>{}</div><div class=\"scroll\">{}</div><figcaption>share of units by score; mean {}, {} score 0</figcaption></figure>",
            colour(i),
            esc(&ix.name),
            histogram_svg(i, ix),
            fixed(ix.distribution.mean, 2),
            pct(ix.distribution.zero_share)
        );
    }
    h.push_str("</div>");

    // Prevalence, once per list.
    h.push_str("<h2>Condition prevalence</h2><p class=\"lede\">Share of analysed units with each condition after the list's hierarchy (the same for every weighting of a list). Conditions no unit has are listed in the full table only.</p>");
    let mut done: Vec<&str> = Vec::new();
    for (i, ix) in c.indices.iter().enumerate() {
        if done.contains(&ix.list.as_str()) {
            continue;
        }
        done.push(&ix.list);
        let absent = ix.prevalence.iter().filter(|p| p.count == 0).count();
        let _ = write!(
            h,
            "<h3>{} <span style=\"font-weight:400;color:#5d6675\">· {} conditions, {} present</span></h3>",
            esc(&ix.list),
            ix.prevalence.len(),
            ix.prevalence.len() - absent
        );
        let present = ix.prevalence.len() - absent;
        if present > 0 {
            h.push_str("<figure>");
            h.push_str("<div class=\"scroll\">");
            h.push_str(&prevalence_svg(ix, colour(i)));
            h.push_str("</div>");
            if present > MAX_BARS {
                let _ = write!(
                    h,
                    "<figcaption>The {MAX_BARS} most frequent of the {present} conditions present; the full table lists every one.</figcaption>"
                );
            }
            h.push_str("</figure>");
        }
        h.push_str("<details><summary>Full table</summary><table><thead><tr><th>key</th><th class=\"l\">condition</th><th>units</th><th>share</th></tr></thead><tbody>");
        for p in &ix.prevalence {
            let _ = write!(
                h,
                "<tr><td><code>{}</code></td><td class=\"l\">{}</td><td>{}</td><td>{}</td></tr>",
                esc(&p.key),
                esc(&p.label),
                fmt_count(p.count),
                pct(p.share)
            );
        }
        h.push_str("</tbody></table></details>");
    }

    // Notes.
    let notes = c.all_notes();
    if !notes.is_empty() {
        h.push_str("<h2>Notes</h2><ul class=\"notes\">");
        for n in notes {
            let _ = write!(h, "<li>{}</li>", esc(&n));
        }
        h.push_str("</ul>");
    }
    h.push_str("<footer>Methods: c-statistic as the Mann–Whitney probability; confidence intervals and tests of correlated c-statistics by DeLong, DeLong &amp; Clarke-Pearson, Biometrics 1988;44:837-45; logistic regression by maximum likelihood (Newton–Raphson) with Wald standard errors; Spearman's rank correlation with average ranks for ties; quartiles by linear interpolation (Hyndman &amp; Fan type 7). Every figure was computed on the analysed units listed above. This page loads nothing from the network.</footer>");
    h.push_str("</main></body></html>\n");
    // Every table scrolls sideways inside the page rather than being cut.
    h.replace("<table>", "<div class=\"scroll\"><table>")
        .replace("</table>", "</table></div>")
}

/// Axis ticks: round values from 0 to at least `max`.
fn ticks(max: f64) -> Vec<f64> {
    let step = super::nice_width(max / 4.0);
    let mut v = Vec::new();
    let mut t = 0.0;
    while t <= max * 1.0001 + 1e-12 {
        v.push(super::tidy(t));
        t += step;
    }
    v
}

/// A horizontal gridline at height `yy` across a plot `pw` wide from
/// `left`, with its tick `label` on the left.
fn gridline(s: &mut String, left: f64, pw: f64, yy: f64, label: &str) {
    let _ = write!(
        s,
        r#"<line class="gridline" x1="{left}" y1="{yy:.1}" x2="{:.1}" y2="{yy:.1}"/><text class="tick" x="{:.1}" y="{:.1}" text-anchor="end">{label}</text>"#,
        left + pw,
        left - 4.0,
        yy + 4.0,
    );
}

/// Axes of a small panel: gridlines, tick labels, titles.
#[allow(clippy::too_many_arguments)]
fn panel_axes(
    s: &mut String,
    (left, top, pw, ph): (f64, f64, f64, f64),
    xmax: f64,
    ymax: f64,
    xlabel: &str,
    ylabel: &str,
    yfmt: &dyn Fn(f64) -> String,
    xfmt: &dyn Fn(f64) -> String,
) {
    for t in ticks(ymax) {
        let yy = top + ph - t / ymax * ph;
        gridline(s, left, pw, yy, &yfmt(t));
    }
    for t in ticks(xmax) {
        let xx = left + t / xmax * pw;
        let _ = write!(
            s,
            r#"<line class="gridline" x1="{xx:.1}" y1="{top}" x2="{xx:.1}" y2="{:.1}"/><text class="tick" x="{xx:.1}" y="{:.1}" text-anchor="middle">{}</text>"#,
            top + ph,
            top + ph + 14.0,
            xfmt(t)
        );
    }
    let _ = write!(
        s,
        r#"<rect x="{left}" y="{top}" width="{pw}" height="{ph}" fill="none" class="axis"/><text class="tick" x="{:.1}" y="{:.1}" text-anchor="middle">{}</text><text class="tick" x="12" y="{:.1}" text-anchor="middle" transform="rotate(-90 12 {:.1})">{}</text>"#,
        left + pw / 2.0,
        top + ph + 30.0,
        esc(xlabel),
        top + ph / 2.0,
        top + ph / 2.0,
        esc(ylabel)
    );
}

/// One funnel panel: the providers' ratios against their expected counts,
/// with the 95% (dashed) and 99.8% (solid) limits; providers outside the
/// 99.8% limits are labelled. Axes are shared between panels.
fn funnel_svg(p: &super::Providers, sp: &super::ProviderSpec, xmax: f64, ymax: f64) -> String {
    let (w, h, left, top, right, bottom) = (320.0, 240.0, 44.0, 10.0, 12.0, 40.0);
    let (pw, ph) = (w - left - right, h - top - bottom);
    let x = |v: f64| left + (v / xmax).min(1.0) * pw;
    let y = |v: f64| top + ph - (v / ymax).clamp(0.0, 1.0) * ph;
    let mut s = String::new();
    let _ = write!(
        s,
        r#"<svg xmlns="http://www.w3.org/2000/svg" width="{w}" height="{h}" viewBox="0 0 {w} {h}" role="img" aria-label="funnel plot, {}">"#,
        esc(&sp.index)
    );
    panel_axes(
        &mut s,
        (left, top, pw, ph),
        xmax,
        ymax,
        "expected events (E)",
        "observed / expected",
        &|t| fmt_num(t),
        &|t| fmt_num(t),
    );
    let _ = write!(
        s,
        r##"<line x1="{left}" y1="{:.1}" x2="{:.1}" y2="{:.1}" stroke="#9aa3ae" stroke-width="1"/>"##,
        y(1.0),
        left + pw,
        y(1.0)
    );
    for (k, style) in [(0usize, "5 3"), (1, "")] {
        for side in 0..2 {
            let mut d = String::new();
            for f in &sp.funnel {
                if f.expected > xmax {
                    break;
                }
                let v = if k == 0 {
                    f.limits95[side]
                } else {
                    f.limits998[side]
                };
                let _ = write!(
                    d,
                    "{}{:.1},{:.1}",
                    if d.is_empty() { "M" } else { "L" },
                    x(f.expected),
                    y(v)
                );
            }
            let _ = write!(
                s,
                r##"<path d="{d}" fill="none" stroke="#5d6675" stroke-width="1.3" stroke-dasharray="{style}"/>"##
            );
        }
    }
    for (k, r) in sp.providers.iter().enumerate() {
        let Some(ratio) = r.ratio else { continue };
        let judged = r.position998 != super::Position::NotJudged;
        let outside = matches!(
            r.position998,
            super::Position::Over | super::Position::Under
        );
        let fill = match r.position998 {
            super::Position::Over => "#de7c00",
            super::Position::Under => "#2458a6",
            super::Position::Inside => "#1a1a1a",
            super::Position::NotJudged => "none",
        };
        let _ = write!(
            s,
            r##"<circle cx="{:.1}" cy="{:.1}" r="3.2" fill="{fill}" stroke="{}" stroke-width="1"><title>{}: O {} E {} O/E {} ({})</title></circle>"##,
            x(r.expected),
            y(ratio),
            if judged { "#fff" } else { "#6b6b6b" },
            esc(&p.names[k]),
            p.observed[k],
            fixed(r.expected, 1),
            fixed(ratio, 2),
            r.position998.word()
        );
        if outside {
            let _ = write!(
                s,
                r##"<text class="tick" x="{:.1}" y="{:.1}" stroke="#fff" stroke-width="3" paint-order="stroke">{}</text>"##,
                x(r.expected) + 5.0,
                y(ratio) - 4.0,
                esc(&p.names[k])
            );
        }
    }
    s.push_str("</svg>");
    s
}

/// One calibration panel: observed share against mean predicted risk by
/// tenths of predicted risk, with the line of perfect calibration.
fn calibration_svg(ix: &IndexResult, i: usize, max: f64) -> String {
    let (w, h, left, top, right, bottom) = (300.0, 240.0, 46.0, 10.0, 12.0, 40.0);
    let (pw, ph) = (w - left - right, h - top - bottom);
    let x = |v: f64| left + (v / max).min(1.0) * pw;
    let y = |v: f64| top + ph - (v / max).min(1.0) * ph;
    let mut s = String::new();
    let _ = write!(
        s,
        r#"<svg xmlns="http://www.w3.org/2000/svg" width="{w}" height="{h}" viewBox="0 0 {w} {h}" role="img" aria-label="calibration, {}">"#,
        esc(&ix.name)
    );
    panel_axes(
        &mut s,
        (left, top, pw, ph),
        max,
        max,
        "mean predicted risk",
        "observed share",
        &pct_short,
        &pct_short,
    );
    let _ = write!(
        s,
        r##"<line x1="{:.1}" y1="{:.1}" x2="{:.1}" y2="{:.1}" stroke="#9aa3ae" stroke-width="1.2" stroke-dasharray="5 4"/>"##,
        x(0.0),
        y(0.0),
        x(max),
        y(max)
    );
    if let Some(o) = &ix.out_of_sample {
        let mut d = String::new();
        for g in &o.calibration {
            let _ = write!(
                d,
                "{}{:.1},{:.1}",
                if d.is_empty() { "M" } else { "L" },
                x(g.mean_predicted),
                y(g.observed_share)
            );
        }
        let _ = write!(
            s,
            r#"<path d="{d}" fill="none" stroke="{}" stroke-width="1.8" stroke-dasharray="{}"/>"#,
            colour(i),
            dash(i)
        );
        for g in &o.calibration {
            let _ = write!(
                s,
                r##"<circle cx="{:.1}" cy="{:.1}" r="3" fill="{}" stroke="#fff"><title>{} units: predicted {}, observed {}</title></circle>"##,
                x(g.mean_predicted),
                y(g.observed_share),
                colour(i),
                fmt_count(g.units as u64),
                pct(g.mean_predicted),
                pct(g.observed_share)
            );
        }
    }
    s.push_str("</svg>");
    s
}

fn out_of_sample_html(c: &Comparison, cv: &super::CrossValidation, h: &mut String) {
    let _ = write!(
        h,
        "<h3>Out of sample</h3><p class=\"lede\" style=\"font-size:13px\">{} folds {} (seed {}; units per fold {}). Each index's model is fitted without one fold and predicts it; the figures come from the pooled out-of-fold predictions. The c-statistics above are in-sample.</p>",
        cv.folds,
        match &cv.grouped_by {
            Some(g) => format!("formed by <code>{}</code> (its units stay in one fold)", esc(g)),
            None => "of single units".into(),
        },
        cv.seed,
        cv.fold_units
            .iter()
            .map(|&u| fmt_count(u as u64))
            .collect::<Vec<_>>()
            .join(", ")
    );
    h.push_str("<table><thead><tr><th>index</th><th>c (pooled)</th><th>c (mean of folds)</th><th>calibration intercept</th><th>calibration slope</th><th>Brier score</th></tr></thead><tbody>");
    let opt = |v: Option<f64>, d: usize| v.map_or("–".to_string(), |v| fixed(v, d));
    for (i, ix) in c.indices.iter().enumerate() {
        let Some(o) = &ix.out_of_sample else { continue };
        let _ = write!(
            h,
            "<tr><td>{}{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
            line_key(i),
            esc(&ix.name),
            opt(o.c_statistic, 3),
            opt(o.c_statistic_mean_of_folds, 3),
            opt(o.calibration_intercept, 3),
            opt(o.calibration_slope, 3),
            fixed(o.brier, 4)
        );
    }
    h.push_str("</tbody></table><p class=\"lede\" style=\"font-size:13px\">Calibration intercept: the correction to the log odds with the predictions as an offset (0 is calibrated in the large); calibration slope: the coefficient of the predicted log odds (1 is ideal, below 1 predictions too extreme); Cox, Biometrika 1958;45:562-5.</p>");
    let max = c
        .indices
        .iter()
        .filter_map(|ix| ix.out_of_sample.as_ref())
        .flat_map(|o| o.calibration.iter())
        .map(|g| g.mean_predicted.max(g.observed_share))
        .fold(0.0f64, f64::max)
        .max(1e-3)
        * 1.05;
    let max = super::nice_width(max / 4.0) * (max / super::nice_width(max / 4.0)).ceil();
    h.push_str("<div class=\"panels\">");
    for (i, ix) in c.indices.iter().enumerate() {
        if ix.out_of_sample.is_none() {
            continue;
        }
        let _ = write!(
            h,
            "<figure><div class=\"t\">{}{}</div>{}<figcaption>tenths of predicted risk; dashed: perfect calibration</figcaption></figure>",
            line_key(i),
            esc(&ix.name),
            calibration_svg(ix, i, max)
        );
    }
    h.push_str("</div>");
}

fn providers_html(p: &super::Providers, h: &mut String) {
    let _ = write!(
        h,
        "<h2>Providers by <code>{}</code></h2><p class=\"lede\">Observed events (O) against the events expected (E) from each index's model, per provider; O/E with its exact Poisson 95% interval (Garwood, Biometrika 1936;28:437-42). Funnel limits at 95% (dashed) and 99.8% (solid) {}. Providers with E below {} are drawn hollow and not judged. Labelled: providers outside the 99.8% limits (orange over, blue under).</p>",
        esc(&p.column),
        match p.overdispersion {
            None => "from the Poisson distribution with Spiegelhalter's interpolation (Stat Med 2005;24:1185-1202)".to_string(),
            Some(m) => format!(
                "allowing for over-dispersion, {} (Spiegelhalter, Qual Saf Health Care 2005;14:347-51), where it was found",
                match m {
                    super::Overdispersion::Multiplicative => "multiplicative",
                    super::Overdispersion::Additive => "additive, with a between-provider variance",
                }
            ),
        },
        fmt_num(p.min_expected)
    );
    let xmax = p
        .specifications
        .iter()
        .flat_map(|s| s.providers.iter().map(|r| r.expected))
        .fold(0.0f64, f64::max)
        * 1.08;
    let judged_ratios = p.specifications.iter().flat_map(|s| {
        s.providers
            .iter()
            .filter(|r| r.position998 != super::Position::NotJudged)
            .filter_map(|r| r.ratio)
    });
    let top_ratio = judged_ratios.fold(1.5f64, f64::max) * 1.1;
    let ymax = super::nice_width(top_ratio / 4.0)
        * (top_ratio / super::nice_width(top_ratio / 4.0)).ceil();
    if xmax > 0.0 {
        h.push_str("<div class=\"panels\">");
        for sp in &p.specifications {
            let [under, inside, over, unjudged] = sp.positions_998;
            let disp = sp.dispersion.as_ref().map_or(String::new(), |d| {
                format!(
                    "; φ {}, τ² {}{}",
                    fixed(d.phi, 2),
                    fixed(d.tau2, 4),
                    if d.widened {
                        ", limits widened"
                    } else {
                        ", limits not widened"
                    }
                )
            });
            let _ = write!(
                h,
                "<figure><div class=\"t\">{}</div>{}<figcaption>at 99.8%: {under} under, {inside} inside, {over} over, {unjudged} not judged{}</figcaption></figure>",
                esc(&sp.index),
                funnel_svg(p, sp, xmax, ymax),
                esc(&disp)
            );
        }
        h.push_str("</div>");
    }
    if !p.agreement.is_empty() {
        h.push_str("<h3>Agreement between indices</h3><table><thead><tr><th>a</th><th class=\"l\">b</th><th>Spearman ρ of O/E</th><th>99.8% position differs</th><th class=\"l\">largest change of O/E</th></tr></thead><tbody>");
        for a in &p.agreement {
            let _ = write!(
                h,
                "<tr><td>{}</td><td class=\"l\">{}</td><td>{}</td><td>{} of {}</td><td class=\"l\">{}</td></tr>",
                esc(&a.a),
                esc(&a.b),
                a.spearman.map_or("–".into(), |r| fixed(r, 3)),
                a.position_changes,
                a.judged,
                a.largest_change.as_ref().map_or("–".into(), |l| format!(
                    "{}: {} → {}",
                    esc(&l.provider),
                    fixed(l.ratio_a, 2),
                    fixed(l.ratio_b, 2)
                ))
            );
        }
        h.push_str("</tbody></table>");
    }
    if p.changes.is_empty() {
        h.push_str("<p>No judged provider changes its 99.8% position with the index chosen.</p>");
    } else {
        let _ = write!(
            h,
            "<h3>Providers whose position depends on the index ({})</h3><table><thead><tr><th>provider</th>",
            p.changes.len()
        );
        for sp in &p.specifications {
            let _ = write!(h, "<th class=\"l\">{}</th>", esc(&sp.index));
        }
        h.push_str("</tr></thead><tbody>");
        for ch in &p.changes {
            let _ = write!(h, "<tr><td>{}</td>", esc(&ch.provider));
            for (pos, r) in ch.positions.iter().zip(&ch.ratios) {
                let _ = write!(
                    h,
                    "<td class=\"l\">{} <span class=\"sub\">{}</span></td>",
                    pos.word(),
                    r.map_or("–".into(), |v| fixed(v, 2))
                );
            }
            h.push_str("</tr>");
        }
        h.push_str("</tbody></table>");
    }
    h.push_str("<details><summary>Every provider under every index</summary><table><thead><tr><th>index</th><th class=\"l\">provider</th><th>units</th><th>O</th><th>E</th><th>O/E</th><th>95% CI</th><th>99.8% limits</th><th class=\"l\">at 95%</th><th class=\"l\">at 99.8%</th></tr></thead><tbody>");
    for sp in &p.specifications {
        for (k, r) in sp.providers.iter().enumerate() {
            let pair = |v: Option<[f64; 2]>| {
                v.map_or("–".to_string(), |[a, b]| {
                    format!("{} – {}", fixed(a, 2), fixed(b, 2))
                })
            };
            let _ = write!(
                h,
                "<tr{}><td>{}</td><td class=\"l\">{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td class=\"l\">{}</td><td class=\"l\">{}</td></tr>",
                if k == 0 { " class=\"first\"" } else { "" },
                if k == 0 { esc(&sp.index) } else { String::new() },
                esc(&p.names[k]),
                fmt_count(p.units[k]),
                fmt_count(p.observed[k]),
                fixed(r.expected, 1),
                r.ratio.map_or("–".into(), |v| fixed(v, 2)),
                pair(r.ci95),
                pair(r.limits998),
                r.position95.word(),
                r.position998.word()
            );
        }
    }
    h.push_str("</tbody></table></details>");
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn escapes_markup() {
        assert_eq!(esc("a<b & \"c\""), "a&lt;b &amp; &quot;c&quot;");
    }
}

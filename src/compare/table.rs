//! The plain-text layout of a comparison, as printed on standard output.

use super::{fmt_count, fmt_num, Comparison, Model};

/// Columns two spaces apart; `left[i]`: column i is left-aligned (others
/// right-aligned).
fn grid(head: &[&str], left: &[bool], rows: &[Vec<String>]) -> String {
    let ncol = head.len();
    let mut widths: Vec<usize> = head.iter().map(|h| h.chars().count()).collect();
    for r in rows {
        for (w, c) in widths.iter_mut().zip(r) {
            *w = (*w).max(c.chars().count());
        }
    }
    let line = |cells: &[String]| -> String {
        let mut s = String::from("  ");
        for (i, c) in cells.iter().enumerate().take(ncol) {
            let pad = widths[i].saturating_sub(c.chars().count());
            if i > 0 {
                s.push_str("  ");
            }
            if left.get(i).copied().unwrap_or(false) {
                s.push_str(c);
                s.push_str(&" ".repeat(pad));
            } else {
                s.push_str(&" ".repeat(pad));
                s.push_str(c);
            }
        }
        s.trim_end().to_string() + "\n"
    };
    let head: Vec<String> = head.iter().map(|h| h.to_string()).collect();
    let mut out = line(&head);
    let rule: Vec<String> = widths.iter().map(|&w| "-".repeat(w)).collect();
    out.push_str(&line(&rule));
    for r in rows {
        out.push_str(&line(r));
    }
    out
}

pub(crate) fn pct(share: f64) -> String {
    format!("{:.1}%", 100.0 * share)
}

pub(crate) fn fixed(v: f64, d: usize) -> String {
    let s = format!("{v:.d$}");
    // "-0.000" → "0.000"
    if s.starts_with('-') && s[1..].chars().all(|c| c == '0' || c == '.') {
        s[1..].to_string()
    } else {
        s
    }
}

pub(crate) fn p_value(p: f64) -> String {
    if p < 0.0001 {
        "<0.0001".into()
    } else {
        format!("{p:.4}")
    }
}

fn wrap(text: &str, indent: &str, width: usize) -> String {
    let mut out = String::new();
    let mut line = String::new();
    for word in text.split_whitespace() {
        if !line.is_empty() && line.len() + 1 + word.len() > width {
            out.push_str(indent);
            out.push_str(&line);
            out.push('\n');
            line.clear();
        }
        if !line.is_empty() {
            line.push(' ');
        }
        line.push_str(word);
    }
    if !line.is_empty() {
        out.push_str(indent);
        out.push_str(&line);
        out.push('\n');
    }
    out
}

fn model_rows(label: &str, m: &Model, rows: &mut Vec<Vec<String>>) {
    for (i, t) in m.terms.iter().enumerate() {
        rows.push(vec![
            if i == 0 {
                label.to_string()
            } else {
                String::new()
            },
            t.name.clone(),
            fixed(t.estimate, 4),
            fixed(t.std_error, 4),
            if i == 0 {
                "-".into()
            } else {
                t.odds_ratio.map_or("-".into(), |o| fixed(o, 3))
            },
            p_value(t.p_value),
            if i == 0 {
                fixed(m.c_statistic, 3)
            } else {
                String::new()
            },
            if i == 0 {
                fixed(m.aic, 1)
            } else {
                String::new()
            },
        ]);
    }
}

/// The comparison as a plain-text report.
pub fn text_table(c: &Comparison) -> String {
    let mut o = String::new();
    let u = &c.units;
    o.push_str(&format!("morbus compare: outcome '{}'", c.outcome));
    if let Some(l) = &c.lookback {
        o.push_str(&format!(
            ", lookback {}",
            if l == "all" {
                "whole history".to_string()
            } else if l.parse::<u32>().is_ok() {
                format!("{l} days")
            } else {
                format!("{l} (days)")
            }
        ));
        if c.window.as_deref() == Some("earlier-only") {
            o.push_str(", earlier episodes only");
        }
    }
    if !c.hierarchy {
        o.push_str(", hierarchies off");
    }
    o.push_str("\n\n");
    o.push_str(&format!(
        "Units: {} read, {} analysed, {} with outcome 1 ({})\n",
        fmt_count(u.read),
        fmt_count(u.analysed),
        fmt_count(u.events),
        pct(u.event_share)
    ));
    let mut left = Vec::new();
    if u.missing_outcome > 0 {
        left.push(format!(
            "{} without an outcome",
            fmt_count(u.missing_outcome)
        ));
    }
    if u.missing_adjustment > 0 {
        left.push(format!(
            "{} with a missing adjustment value",
            fmt_count(u.missing_adjustment)
        ));
    }
    if u.missing_age > 0 {
        left.push(format!(
            "{} without a readable age",
            fmt_count(u.missing_age)
        ));
    }
    if !left.is_empty() {
        o.push_str(&format!("Left out: {}\n", left.join(", ")));
    }
    if c.adjustment.is_empty() {
        o.push_str("Models: outcome on the score alone\n");
    } else {
        let mut terms = Vec::new();
        let mut cats: Vec<(&str, &str)> = Vec::new();
        for t in &c.adjustment {
            terms.push(t.name.clone());
            if let Some(r) = &t.reference {
                if !cats.iter().any(|(col, _)| *col == t.column) {
                    cats.push((&t.column, r));
                }
            }
        }
        o.push_str(&format!(
            "Models: outcome on the score + {}\n",
            terms.join(" + ")
        ));
        for (col, r) in cats {
            o.push_str(&format!("  ({col}: reference level '{r}')\n"));
        }
    }

    o.push_str("\nDiscrimination: c-statistic of each score alone (95% CI by DeLong et al. 1988), and of its model\n");
    let rows: Vec<Vec<String>> = c
        .indices
        .iter()
        .map(|i| {
            let (cs, ci) = match &i.c_statistic {
                Some(s) => (
                    fixed(s.estimate, 3),
                    s.ci95.map_or("-".into(), |[a, b]| {
                        format!("{} to {}", fixed(a, 3), fixed(b, 3))
                    }),
                ),
                None => ("-".into(), "-".into()),
            };
            let (mc, aic) = match &i.model {
                Some(m) => (fixed(m.c_statistic, 3), fixed(m.aic, 1)),
                None => ("-".into(), "-".into()),
            };
            vec![i.name.clone(), cs, ci, mc, aic]
        })
        .collect();
    o.push_str(&grid(
        &["index", "c", "95% CI", "model c", "model AIC"],
        &[true],
        &rows,
    ));
    if let Some(m) = &c.adjustment_model {
        o.push_str(&format!(
            "  adjustment terms alone: c {}, AIC {}\n",
            fixed(m.c_statistic, 3),
            fixed(m.aic, 1)
        ));
    }

    o.push_str("\nScore distribution\n");
    let rows: Vec<Vec<String>> = c
        .indices
        .iter()
        .map(|i| {
            let d = &i.distribution;
            vec![
                i.name.clone(),
                fixed(d.mean, 2),
                d.sd.map_or("-".into(), |s| fixed(s, 2)),
                fmt_num(d.min),
                fmt_num(d.q1),
                fmt_num(d.median),
                fmt_num(d.q3),
                fmt_num(d.max),
                pct(d.zero_share),
            ]
        })
        .collect();
    o.push_str(&grid(
        &[
            "index", "mean", "SD", "min", "Q1", "median", "Q3", "max", "score 0",
        ],
        &[true],
        &rows,
    ));

    o.push_str("\nLogistic models (Wald standard errors)\n");
    let mut rows = Vec::new();
    if let Some(m) = &c.adjustment_model {
        model_rows("(adjustment only)", m, &mut rows);
    }
    for i in &c.indices {
        if let Some(m) = &i.model {
            model_rows(&i.name, m, &mut rows);
        } else {
            rows.push(vec![
                i.name.clone(),
                "(no model: see notes)".into(),
                String::new(),
                String::new(),
                String::new(),
                String::new(),
                String::new(),
                String::new(),
            ]);
        }
    }
    o.push_str(&grid(
        &[
            "model",
            "term",
            "estimate",
            "SE",
            "odds ratio",
            "p",
            "c",
            "AIC",
        ],
        &[true, true],
        &rows,
    ));

    if !c.pairs.is_empty() {
        o.push_str(
            "\nPairs: difference in c-statistic (DeLong test) and Spearman correlation of the scores\n",
        );
        let rows: Vec<Vec<String>> = c
            .pairs
            .iter()
            .map(|p| {
                let (d, ci, pv) = match &p.delong {
                    Some(t) => (
                        fixed(t.difference, 4),
                        format!("{} to {}", fixed(t.ci95[0], 4), fixed(t.ci95[1], 4)),
                        p_value(t.p_value),
                    ),
                    None => ("-".into(), "-".into(), "-".into()),
                };
                vec![
                    format!("{} vs {}", p.a, p.b),
                    d,
                    ci,
                    pv,
                    p.spearman.map_or("-".into(), |r| fixed(r, 3)),
                ]
            })
            .collect();
        o.push_str(&grid(
            &["pair (a vs b)", "c(a) - c(b)", "95% CI", "p", "Spearman"],
            &[true],
            &rows,
        ));
    }

    o.push_str("\nCondition prevalence among the analysed units (after the hierarchy)\n");
    let mut done: Vec<&str> = Vec::new();
    for i in &c.indices {
        if done.contains(&i.list.as_str()) {
            continue;
        }
        done.push(&i.list);
        let absent = i.prevalence.iter().filter(|p| p.count == 0).count();
        o.push_str(&format!(
            "\n {}: {} conditions, {} present\n",
            i.list,
            i.prevalence.len(),
            i.prevalence.len() - absent
        ));
        let rows: Vec<Vec<String>> = i
            .prevalence
            .iter()
            .filter(|p| p.count > 0)
            .map(|p| {
                let mut label = p.label.clone();
                if label.chars().count() > 56 {
                    label = label.chars().take(55).collect::<String>() + "~";
                }
                vec![label, fmt_count(p.count), pct(p.share), p.key.clone()]
            })
            .collect();
        if !rows.is_empty() {
            o.push_str(&grid(
                &["condition", "units", "share", "key"],
                &[true, false, false, true],
                &rows,
            ));
        }
        if absent > 0 {
            o.push_str(&format!(
                "  ({absent} conditions that no analysed unit has are left out here; the JSON and HTML outputs list them)\n"
            ));
        }
    }

    let mut notes: Vec<String> = c.notes.clone();
    for n in &c.adjustment_notes {
        notes.push(format!("adjustment-only model: {n}"));
    }
    for i in &c.indices {
        for n in &i.notes {
            notes.push(format!("{}: {n}", i.name));
        }
    }
    for p in &c.pairs {
        for n in &p.notes {
            notes.push(format!("{} vs {}: {n}", p.a, p.b));
        }
    }
    if !notes.is_empty() {
        o.push_str("\nNotes\n");
        for n in notes {
            let w = wrap(&n, "    ", 96);
            o.push_str("  -");
            o.push_str(&w[3..]);
        }
    }
    o.push_str("\nCaution\n");
    o.push_str(&wrap(&c.caution, "  ", 98));
    o
}

//! The plain-text layout of a comparison, as printed on standard output.

use super::{fmt_count, fmt_num, Comparison, Distribution, IndexResult, Model};

/// The five-number summary with one number of decimals for all five: none
/// when every one is whole, else two.
pub(crate) fn quantiles(d: &Distribution) -> [String; 5] {
    let v = [d.min, d.q1, d.median, d.q3, d.max];
    let places = if v.iter().all(|x| x.fract() == 0.0) {
        0
    } else {
        2
    };
    v.map(|x| fixed(x, places))
}

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

/// The cells of a model's table, a row per term: the model's `label` and
/// its c-statistic and AIC on the first row only; the term, estimate,
/// standard error (and the clustered one), odds ratio (`none` for the
/// intercept and where there is none), p-value (and the clustered one).
/// Shared by the text and the HTML report.
pub(crate) fn model_cells(label: &str, m: &Model, clustered: bool, none: &str) -> Vec<Vec<String>> {
    let mut rows = Vec::with_capacity(m.terms.len());
    for (i, t) in m.terms.iter().enumerate() {
        let first = i == 0;
        let on_first = |text: String| if first { text } else { String::new() };
        let mut row = vec![
            on_first(label.to_string()),
            t.name.clone(),
            fixed(t.estimate, 4),
            fixed(t.std_error, 4),
            if first {
                none.into()
            } else {
                t.odds_ratio.map_or(none.into(), |o| fixed(o, 3))
            },
            p_value(t.p_value),
            on_first(fixed(m.c_statistic, 3)),
            on_first(fixed(m.aic, 1)),
        ];
        if clustered {
            row.insert(6, t.cluster_p_value.map_or(none.into(), p_value));
            row.insert(4, t.cluster_std_error.map_or(none.into(), |v| fixed(v, 4)));
        }
        rows.push(row);
    }
    rows
}

/// An index's discrimination cells: its c-statistic, the 95% CI, the 95%
/// CI by clusters (when `clustered`), its model's c-statistic and AIC;
/// `none` where there is no value, `to` between an interval's ends.
/// Shared by the text and the HTML report.
pub(crate) fn discrimination_cells(
    i: &IndexResult,
    clustered: bool,
    none: &str,
    to: &str,
) -> Vec<String> {
    let interval = |ci: Option<[f64; 2]>| {
        ci.map_or(none.to_string(), |[a, b]| {
            format!("{}{to}{}", fixed(a, 3), fixed(b, 3))
        })
    };
    let (cs, ci, cluster_ci) = match &i.c_statistic {
        Some(s) => (
            fixed(s.estimate, 3),
            interval(s.ci95),
            interval(s.cluster_ci95),
        ),
        None => (none.to_string(), none.to_string(), none.to_string()),
    };
    let (mc, aic) = match &i.model {
        Some(m) => (fixed(m.c_statistic, 3), fixed(m.aic, 1)),
        None => (none.to_string(), none.to_string()),
    };
    let mut row = vec![cs, ci];
    if clustered {
        row.push(cluster_ci);
    }
    row.extend([mc, aic]);
    row
}

fn model_rows(label: &str, m: &Model, clustered: bool, rows: &mut Vec<Vec<String>>) {
    rows.extend(model_cells(label, m, clustered, "-"));
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
    let left = u.left_out();
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
    for sp in &c.splines {
        o.push_str(&format!(
            "  ({}: restricted cubic spline, {} knots at {} = quantiles {} (Harrell 2015); terms {})\n",
            sp.column,
            sp.knots.len(),
            sp.knots.iter().map(|v| fmt_num(*v)).collect::<Vec<_>>().join(", "),
            sp.quantiles.iter().map(|v| fmt_num(*v)).collect::<Vec<_>>().join(", "),
            sp.terms.join(", ")
        ));
    }
    if let Some(cl) = &c.clusters {
        o.push_str(&format!(
            "Clusters: '{}', {} clusters (largest {} units): cluster-robust standard errors for the models, c-statistic intervals and tests allowing for clusters (Obuchowski 1997)\n",
            cl.column,
            fmt_count(cl.clusters as u64),
            fmt_count(cl.largest as u64)
        ));
    }

    o.push_str("\nDiscrimination: c-statistic of each score alone (95% CI by DeLong et al. 1988), and of its model\n");
    let rows: Vec<Vec<String>> = c
        .indices
        .iter()
        .map(|i| {
            let mut row = vec![i.name.clone()];
            row.extend(discrimination_cells(i, c.clusters.is_some(), "-", " to "));
            row
        })
        .collect();
    let mut head = vec!["index", "c", "95% CI"];
    if c.clusters.is_some() {
        head.push("95% CI (clusters)");
    }
    head.extend(["model c", "model AIC"]);
    o.push_str(&grid(&head, &[true], &rows));
    if let Some(m) = &c.adjustment_model {
        o.push_str(&format!(
            "  adjustment terms alone: c {}, AIC {}\n",
            fixed(m.c_statistic, 3),
            fixed(m.aic, 1)
        ));
    }

    if c.indices.iter().any(|i| i.added_value.is_some()) {
        let versus = c
            .indices
            .iter()
            .find_map(|i| i.added_value.as_ref())
            .map_or("", |a| a.versus.as_str());
        o.push_str(&format!(
            "\nAdded value of each score: likelihood-ratio test of its model against the {} alone (1 df)\n",
            if versus == "intercept" { "intercept" } else { "adjustment terms" }
        ));
        let rows: Vec<Vec<String>> = c
            .indices
            .iter()
            .map(|i| match &i.added_value {
                Some(a) => vec![i.name.clone(), fixed(a.statistic, 2), p_value(a.p_value)],
                None => vec![i.name.clone(), "-".into(), "-".into()],
            })
            .collect();
        o.push_str(&grid(&["index", "chi-square", "p"], &[true], &rows));
    }

    if let Some(cv) = &c.cross_validation {
        o.push_str(&format!(
            "\nOut of sample: {} folds {} (seed {}; units per fold {}); in-sample figures are above\n",
            cv.folds,
            match &cv.grouped_by {
                Some(g) => format!("by '{g}' (its units stay in one fold)"),
                None => "of single units".to_string(),
            },
            cv.seed,
            cv.fold_units
                .iter()
                .map(|&u| fmt_count(u as u64))
                .collect::<Vec<_>>()
                .join(", ")
        ));
        let rows: Vec<Vec<String>> = c
            .indices
            .iter()
            .map(|i| match &i.out_of_sample {
                Some(s) => vec![
                    i.name.clone(),
                    s.c_statistic.map_or("-".into(), |v| fixed(v, 3)),
                    s.c_statistic_mean_of_folds
                        .map_or("-".into(), |v| fixed(v, 3)),
                    s.calibration_intercept.map_or("-".into(), |v| fixed(v, 3)),
                    s.calibration_slope.map_or("-".into(), |v| fixed(v, 3)),
                    fixed(s.brier, 4),
                ],
                None => vec![
                    i.name.clone(),
                    "-".into(),
                    "-".into(),
                    "-".into(),
                    "-".into(),
                    "-".into(),
                ],
            })
            .collect();
        o.push_str(&grid(
            &[
                "index",
                "c (pooled)",
                "c (fold mean)",
                "calibration intercept",
                "calibration slope",
                "Brier",
            ],
            &[true],
            &rows,
        ));
        o.push_str(
            "  Calibration by tenths of predicted risk: mean predicted / observed share (%)\n",
        );
        let rows: Vec<Vec<String>> = c
            .indices
            .iter()
            .filter_map(|i| {
                let s = i.out_of_sample.as_ref()?;
                let mut r = vec![i.name.clone()];
                r.extend(s.calibration.iter().map(|g| {
                    format!(
                        "{:.1}/{:.1}",
                        100.0 * g.mean_predicted,
                        100.0 * g.observed_share
                    )
                }));
                Some(r)
            })
            .collect();
        let head: Vec<String> = (1..=10).map(|g| format!("{g}")).collect();
        let mut h: Vec<&str> = vec!["index"];
        h.extend(head.iter().map(|s| s.as_str()));
        o.push_str(&grid(&h, &[true], &rows));
    }

    o.push_str("\nScore distribution\n");
    let rows: Vec<Vec<String>> = c
        .indices
        .iter()
        .map(|i| {
            let d = &i.distribution;
            let [min, q1, median, q3, max] = quantiles(d);
            vec![
                i.name.clone(),
                fixed(d.mean, 2),
                d.sd.map_or("-".into(), |s| fixed(s, 2)),
                min,
                q1,
                median,
                q3,
                max,
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

    let clustered = c.clusters.is_some();
    o.push_str(if clustered {
        "\nLogistic models (Wald standard errors, and cluster-robust ones)\n"
    } else {
        "\nLogistic models (Wald standard errors)\n"
    });
    let mut rows = Vec::new();
    if let Some(m) = &c.adjustment_model {
        model_rows("(adjustment only)", m, clustered, &mut rows);
    }
    for i in &c.indices {
        if let Some(m) = &i.model {
            model_rows(&i.name, m, clustered, &mut rows);
        } else {
            let mut row = vec![i.name.clone(), "(no model: see notes)".into()];
            row.resize(if clustered { 10 } else { 8 }, String::new());
            rows.push(row);
        }
    }
    let mut head = vec!["model", "term", "estimate", "SE"];
    if clustered {
        head.push("cluster SE");
    }
    head.extend(["odds ratio", "p"]);
    if clustered {
        head.push("cluster p");
    }
    head.extend(["c", "AIC"]);
    o.push_str(&grid(&head, &[true, true], &rows));

    if !c.pairs.is_empty() {
        o.push_str(
            "\nPairs: difference in c-statistic (DeLong test) and Spearman correlation of the scores\n",
        );
        let pc = &c.pairs_compared;
        match &pc.reference {
            Some(r) => o.push_str(&format!(
                "  each index against the reference {r}: {} tests (all pairs would be {})\n",
                pc.tests, pc.tests_if_all_pairs
            )),
            None => o.push_str(&format!(
                "  all pairs: {} tests; p-values are not adjusted for their number (--reference SPEC compares with one index)\n",
                pc.tests
            )),
        }
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
                let mut row = vec![
                    format!("{} vs {}", p.a, p.b),
                    d,
                    ci,
                    pv,
                    p.spearman.map_or("-".into(), |r| fixed(r, 3)),
                ];
                if clustered {
                    row.insert(
                        4,
                        p.delong
                            .as_ref()
                            .and_then(|t| t.cluster.as_ref())
                            .map_or("-".into(), |t| p_value(t.p_value)),
                    );
                }
                row
            })
            .collect();
        let mut head = vec!["pair (a vs b)", "c(a) - c(b)", "95% CI", "p"];
        if clustered {
            head.push("p (clusters)");
        }
        head.push("Spearman");
        o.push_str(&grid(&head, &[true], &rows));
    }

    if let Some(p) = &c.providers {
        providers_text(p, &mut o);
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

    let notes = c.all_notes();
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

fn ratio(v: Option<f64>) -> String {
    v.map_or("-".into(), |r| fixed(r, 2))
}

fn providers_text(p: &super::Providers, o: &mut String) {
    o.push_str(&format!(
        "\nProviders by '{}': observed (O) and expected (E) events, O/E with its exact 95% interval\n",
        p.column
    ));
    o.push_str(&format!(
        "  (Garwood 1936); position against funnel limits at 99.8% ({}); E below {} not judged\n",
        match p.overdispersion {
            None => "Poisson, Spiegelhalter 2005".to_string(),
            Some(m) => format!(
                "{} over-dispersion, Spiegelhalter 2005 QSHC",
                match m {
                    super::Overdispersion::Multiplicative => "multiplicative",
                    super::Overdispersion::Additive => "additive",
                }
            ),
        },
        super::fmt_num(p.min_expected)
    ));
    for s in &p.specifications {
        let [under, inside, over, unjudged] = s.positions_998;
        o.push_str(&format!(
            "\n {}: {under} under, {inside} inside, {over} over the 99.8% limits, {unjudged} not judged\n",
            s.index
        ));
        if let Some(d) = &s.dispersion {
            o.push_str(&format!(
                "  over-dispersion from {} providers: phi {} (test of none: p {}), tau-squared {}; limits {}\n",
                d.providers,
                fixed(d.phi, 3),
                d.p_value.map_or("-".into(), p_value),
                fixed(d.tau2, 5),
                if d.widened { "widened" } else { "not widened (no over-dispersion found)" }
            ));
        }
        let rows: Vec<Vec<String>> = s
            .providers
            .iter()
            .enumerate()
            .map(|(k, r)| {
                vec![
                    p.names[k].clone(),
                    fmt_count(p.units[k]),
                    fmt_count(p.observed[k]),
                    fixed(r.expected, 1),
                    ratio(r.ratio),
                    r.ci95.map_or("-".into(), |[a, b]| {
                        format!("{} to {}", fixed(a, 2), fixed(b, 2))
                    }),
                    r.limits998.map_or("-".into(), |[a, b]| {
                        format!("{} to {}", fixed(a, 2), fixed(b, 2))
                    }),
                    r.position95.word().into(),
                    r.position998.word().into(),
                ]
            })
            .collect();
        o.push_str(&grid(
            &[
                "provider",
                "units",
                "O",
                "E",
                "O/E",
                "95% CI",
                "99.8% limits",
                "at 95%",
                "at 99.8%",
            ],
            &[true, false, false, false, false, false, false, true, true],
            &rows,
        ));
    }
    if !p.agreement.is_empty() {
        o.push_str("\n Agreement between indices (providers judged under both)\n");
        let rows: Vec<Vec<String>> = p
            .agreement
            .iter()
            .map(|a| {
                vec![
                    format!("{} vs {}", a.a, a.b),
                    a.spearman.map_or("-".into(), |r| fixed(r, 3)),
                    format!("{} of {}", a.position_changes, a.judged),
                    a.largest_change.as_ref().map_or("-".into(), |l| {
                        format!(
                            "{} ({} to {})",
                            l.provider,
                            fixed(l.ratio_a, 2),
                            fixed(l.ratio_b, 2)
                        )
                    }),
                ]
            })
            .collect();
        o.push_str(&grid(
            &[
                "pair (a vs b)",
                "Spearman of O/E",
                "99.8% position differs",
                "largest change of O/E",
            ],
            &[true, false, false, true],
            &rows,
        ));
    }
    if p.changes.is_empty() {
        o.push_str("\n No judged provider changes its 99.8% position with the index chosen.\n");
    } else {
        o.push_str(&format!(
            "\n Providers whose 99.8% position depends on the index chosen ({})\n",
            p.changes.len()
        ));
        let mut head: Vec<&str> = vec!["provider"];
        head.extend(p.specifications.iter().map(|s| s.index.as_str()));
        let rows: Vec<Vec<String>> = p
            .changes
            .iter()
            .map(|c| {
                let mut r = vec![c.provider.clone()];
                r.extend(
                    c.positions
                        .iter()
                        .zip(&c.ratios)
                        .map(|(pos, rt)| format!("{} {}", pos.word(), ratio(*rt))),
                );
                r
            })
            .collect();
        o.push_str(&grid(&head, &[true], &rows));
    }
}

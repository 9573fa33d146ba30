//! Printing for `morbus lists show | check | diff`; the content comes from
//! the library (`morbus::lists::{describe, check_path, diff}`).

use std::io::Write;
use std::path::Path;

use morbus::lists::diff::CodeLine;
use morbus::lists::{self, CodeList};
use morbus::Error;

/// A line of a list's text for the terminal: control characters escaped as
/// everywhere else (see `morbus::pipeline::escaped`).
pub fn shown(text: &str) -> String {
    morbus::pipeline::escaped(text.as_bytes())
}

fn write_err(e: std::io::Error) -> Error {
    Error::io("cannot write output", e)
}

fn json_out<T: serde::Serialize>(v: &T) -> Result<(), Error> {
    let mut out = morbus::io::atomic::stdout();
    let text = serde_json::to_string_pretty(v)
        .map_err(|e| Error::Usage(format!("cannot write JSON: {e}")))?;
    writeln!(out, "{text}").map_err(write_err)
}

/// `lists show`.
pub fn show(list: &CodeList, json: bool) -> Result<(), Error> {
    let d = lists::describe(list);
    if json {
        return json_out(&d);
    }
    let mut s = String::new();
    let mut line = |t: String| {
        s.push_str(&shown(t.trim_end()));
        s.push('\n');
    };
    line(format!("list               {}", d.name));
    line(format!("version            {}", d.version));
    line(format!("title              {}", d.title));
    for e in &d.editions {
        line(format!("edition            {e}"));
    }
    line(format!("source             {}", d.source));
    line(format!("origin             {}", d.origin));
    line(format!("checksum           {}", d.checksum));
    line(format!("default weighting  {}", d.default_weighting));
    line(String::new());
    let kw = d.conditions.iter().map(|c| c.key.len()).max().unwrap_or(0);
    line(format!(
        "conditions ({}; output columns follow this order)",
        d.conditions.len()
    ));
    for (i, c) in d.conditions.iter().enumerate() {
        line(format!(
            "  {:>3}. {:<kw$}  {}  [{}]",
            i + 1,
            c.key,
            c.label,
            c.source
        ));
        for n in &c.notes {
            line(format!("       {:<kw$}  note: {n}", ""));
        }
    }
    line(String::new());
    line("codes per condition (as written -> normalised, line)".into());
    for c in &d.conditions {
        line(format!("  {} ({} entries)", c.key, c.codes.len()));
        let ww = c.codes.iter().map(|x| x.written.len()).max().unwrap_or(0);
        let nw = c
            .codes
            .iter()
            .map(|x| x.normalised.len())
            .max()
            .unwrap_or(0);
        for x in &c.codes {
            line(format!(
                "      {:<ww$} -> {:<nw$}  line {}",
                x.written, x.normalised, x.line
            ));
        }
    }
    line(String::new());
    if d.hierarchy.is_empty() {
        line("hierarchy: none".into());
    } else {
        line("hierarchy (when both are present, the second is dropped)".into());
        for h in &d.hierarchy {
            line(format!(
                "  {} supersedes {}  [{}]",
                h.superior, h.inferior, h.source
            ));
        }
    }
    for w in &d.weightings {
        line(String::new());
        line(format!(
            "weighting {}{}: {}  [{}]",
            w.name,
            if w.default { " (default)" } else { "" },
            w.label,
            w.source
        ));
        let vw = w.weights.iter().map(|x| x.value.len()).max().unwrap_or(0);
        for x in &w.weights {
            let src = if x.source.is_empty() || x.source == w.source {
                String::new()
            } else {
                format!("  [{}]", x.source)
            };
            line(format!("  {:<kw$}  {:>vw$}{src}", x.condition, x.value));
        }
        if !w.bands.is_empty() {
            line("  bands:".into());
            for b in &w.bands {
                line(format!(
                    "    {}  from {} to {}  [{}]",
                    b.name, b.lower, b.upper, b.source
                ));
            }
        }
    }
    line(String::new());
    if d.age_points.is_empty() {
        line("age points: none".into());
    } else {
        line("age points (added in the _age columns, every weighting)".into());
        for a in &d.age_points {
            let to = a.to.map_or("and over".to_string(), |t| format!("to {t}"));
            line(format!("  {} {to}: +{}  [{}]", a.from, a.points, a.source));
        }
    }
    morbus::io::atomic::stdout()
        .write_all(s.as_bytes())
        .map_err(write_err)
}

/// `lists check`: every diagnostic on standard output; exit 2 on errors.
pub fn check(path: &Path) -> Result<(), Error> {
    let report = lists::check_path(path);
    let mut out = morbus::io::atomic::stdout();
    for d in report.diagnostics() {
        writeln!(out, "{d}").map_err(write_err)?;
    }
    for p in &report.skipped {
        writeln!(
            out,
            "{}: note: skipped (an upper-case name is a project file, not a list)",
            p.display()
        )
        .map_err(write_err)?;
    }
    for l in report.lists() {
        writeln!(
            out,
            "{}: ok: list '{}' version {}, {} conditions, {} code entries, checksum {}",
            l.origin,
            l.name,
            l.version,
            l.conditions.len(),
            l.code_entries(),
            &l.checksum[..12]
        )
        .map_err(write_err)?;
    }
    let (errors, warnings) = (report.errors(), report.warnings());
    let failed = report.files.iter().filter(|f| f.list.is_none()).count();
    writeln!(
        out,
        "{}: {} error(s), {} warning(s); {} list(s) valid, {} invalid",
        path.display(),
        errors,
        warnings,
        report.files.len() - failed,
        failed
    )
    .map_err(write_err)?;
    out.flush().map_err(write_err)?;
    if errors > 0 {
        return Err(Error::Usage(format!(
            "{} has {errors} error(s) in code lists (shown above)",
            path.display()
        )));
    }
    Ok(())
}

fn code_line(side: &str, c: &CodeLine) -> String {
    if c.written == c.normalised {
        format!("{}  ({side} line {})", c.normalised, c.line)
    } else {
        format!(
            "{}  ({side} line {}: '{}')",
            c.normalised, c.line, c.written
        )
    }
}

/// `lists diff`: a report; exit 0 whenever both lists loaded.
pub fn diff(a: &CodeList, b: &CodeList, json: bool) -> Result<(), Error> {
    let d = lists::diff(a, b);
    if json {
        return json_out(&d);
    }
    let s = diff_text(&d);
    morbus::io::atomic::stdout()
        .write_all(s.as_bytes())
        .map_err(write_err)
}

/// `lists diff DIR_A DIR_B`: each list of both directories paired by name
/// (the report of a two-list diff each), then the lists on one side only.
pub fn diff_dirs(d: &lists::DirDiff, json: bool) -> Result<(), Error> {
    if json {
        return json_out(d);
    }
    let mut s = format!("=== a: {}\n=== b: {}\n", d.a, d.b);
    if !d.has_changes() {
        s.push_str(&format!(
            "no differences: the same {} lists with the same content\n",
            d.lists.len()
        ));
    }
    for l in &d.lists {
        s.push('\n');
        s.push_str(&diff_text(l));
    }
    if !d.only_in_a.is_empty() || !d.only_in_b.is_empty() {
        s.push('\n');
    }
    for o in &d.only_in_a {
        s.push_str(&format!(
            "only in a: - {} {}, {}, checksum {}\n",
            o.name,
            o.version,
            o.origin,
            &o.checksum[..12]
        ));
    }
    for o in &d.only_in_b {
        s.push_str(&format!(
            "only in b: + {} {}, {}, checksum {}\n",
            o.name,
            o.version,
            o.origin,
            &o.checksum[..12]
        ));
    }
    morbus::io::atomic::stdout()
        .write_all(s.as_bytes())
        .map_err(write_err)
}

/// The text report of a two-list diff.
fn diff_text(d: &lists::ListDiff) -> String {
    let mut s = String::new();
    let mut line = |t: String| {
        s.push_str(&shown(t.trim_end()));
        s.push('\n');
    };
    line(format!(
        "--- a: {} {}, {}, checksum {}",
        d.a.name,
        d.a.version,
        d.a.origin,
        &d.a.checksum[..12]
    ));
    line(format!(
        "+++ b: {} {}, {}, checksum {}",
        d.b.name,
        d.b.version,
        d.b.origin,
        &d.b.checksum[..12]
    ));
    if !d.has_changes() {
        line("no differences: same content (same checksum)".into());
    }
    if let Some(n) = d.version_note() {
        line(format!("note: {n}"));
    }
    for c in &d.metadata {
        line(format!("{}: {} -> {}", c.what, c.before, c.after));
    }
    if d.condition_order_changed {
        line("condition order changed (output columns follow it)".into());
    }
    for k in &d.conditions_removed {
        line(format!("condition removed: - {k}"));
    }
    for k in &d.conditions_added {
        line(format!("condition added: + {k}"));
    }
    for c in &d.labels_changed {
        line(format!("{}: '{}' -> '{}'", c.what, c.before, c.after));
    }
    if !d.codes.is_empty() {
        line("codes:".into());
        for c in &d.codes {
            line(format!(
                "  {} ({} removed, {} added)",
                c.condition,
                c.removed.len(),
                c.added.len()
            ));
            for x in &c.removed {
                line(format!("    - {}", code_line("a", x)));
            }
            for x in &c.added {
                line(format!("    + {}", code_line("b", x)));
            }
        }
    }
    if !d.hierarchy_removed.is_empty() || !d.hierarchy_added.is_empty() {
        line("hierarchy:".into());
        for p in &d.hierarchy_removed {
            line(format!("  - {} supersedes {}", p.superior, p.inferior));
        }
        for p in &d.hierarchy_added {
            line(format!("  + {} supersedes {}", p.superior, p.inferior));
        }
    }
    for w in &d.weightings_removed {
        line(format!("weighting removed: - {w}"));
    }
    for w in &d.weightings_added {
        line(format!("weighting added: + {w}"));
    }
    for c in &d.weightings_changed {
        line(format!("{}: '{}' -> '{}'", c.what, c.before, c.after));
    }
    if !d.weights.is_empty() {
        line("weights:".into());
        for w in &d.weights {
            line(format!(
                "  {} {}: {} -> {}",
                w.weighting,
                w.condition,
                w.before.as_deref().unwrap_or("(none)"),
                w.after.as_deref().unwrap_or("(none)")
            ));
        }
    }
    for b in &d.bands_removed {
        line(format!("band removed: - {b}"));
    }
    for b in &d.bands_added {
        line(format!("band added: + {b}"));
    }
    for x in &d.age_points_removed {
        line(format!("age points removed: - {x}"));
    }
    for x in &d.age_points_added {
        line(format!("age points added: + {x}"));
    }
    for c in &d.sources_changed {
        line(format!("{}: '{}' -> '{}'", c.what, c.before, c.after));
    }
    s
}

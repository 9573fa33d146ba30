//! What changed between two lists: `morbus lists diff`.
//!
//! Codes are compared per condition by their normalised form (`I25.2` and
//! `I252` are the same entry), weights by value (`1` and `1.00` are the same
//! weight), so that the diff shows what can change a score, plus every
//! changed source or label so that any two lists with different checksums
//! show at least one difference.

use std::collections::BTreeMap;

use serde::Serialize;

use super::canonical::{bound, min_decimals, num};
use super::CodeList;

/// One side of a diff.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Side {
    pub name: String,
    pub version: String,
    pub origin: String,
    pub checksum: String,
}

/// A value that changed.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Change {
    /// What changed, e.g. `version`, `label of myocardial_infarction`.
    pub what: String,
    pub before: String,
    pub after: String,
}

/// A code entry on one side.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct CodeLine {
    pub normalised: String,
    pub written: String,
    pub line: usize,
}

/// Codes removed from and added to one condition.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ConditionCodes {
    pub condition: String,
    pub removed: Vec<CodeLine>,
    pub added: Vec<CodeLine>,
}

/// `superior` supersedes `inferior`.
#[derive(Clone, Debug, PartialEq, Eq, PartialOrd, Ord, Serialize)]
pub struct Pair {
    pub superior: String,
    pub inferior: String,
}

/// A weight that differs; `None` where the condition or weight is absent.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct WeightChange {
    pub weighting: String,
    pub condition: String,
    pub before: Option<String>,
    pub after: Option<String>,
}

/// Every difference from list `a` to list `b`.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ListDiff {
    pub a: Side,
    pub b: Side,
    /// name, version, title, editions, source, default weighting.
    pub metadata: Vec<Change>,
    pub conditions_added: Vec<String>,
    pub conditions_removed: Vec<String>,
    /// Labels of conditions present in both.
    pub labels_changed: Vec<Change>,
    /// The conditions common to both are declared in another order (output
    /// columns follow that order).
    pub condition_order_changed: bool,
    /// Conditions with codes removed or added, in `b`'s order then `a`'s.
    pub codes: Vec<ConditionCodes>,
    pub hierarchy_added: Vec<Pair>,
    pub hierarchy_removed: Vec<Pair>,
    pub weightings_added: Vec<String>,
    pub weightings_removed: Vec<String>,
    /// Label or printed decimals of weightings present in both.
    pub weightings_changed: Vec<Change>,
    /// Weights of weightings present in both.
    pub weights: Vec<WeightChange>,
    /// `weighting band lower upper`.
    pub bands_added: Vec<String>,
    pub bands_removed: Vec<String>,
    /// `from-to points`.
    pub age_points_added: Vec<String>,
    pub age_points_removed: Vec<String>,
    /// Source citations that differ on records present in both.
    pub sources_changed: Vec<Change>,
}

impl ListDiff {
    /// Whether the two lists have the same content (same checksum).
    pub fn same_content(&self) -> bool {
        self.a.checksum == self.b.checksum
    }

    /// Whether any difference was found.
    pub fn has_changes(&self) -> bool {
        !(self.metadata.is_empty()
            && self.conditions_added.is_empty()
            && self.conditions_removed.is_empty()
            && self.labels_changed.is_empty()
            && !self.condition_order_changed
            && self.codes.is_empty()
            && self.hierarchy_added.is_empty()
            && self.hierarchy_removed.is_empty()
            && self.weightings_added.is_empty()
            && self.weightings_removed.is_empty()
            && self.weightings_changed.is_empty()
            && self.weights.is_empty()
            && self.bands_added.is_empty()
            && self.bands_removed.is_empty()
            && self.age_points_added.is_empty()
            && self.age_points_removed.is_empty()
            && self.sources_changed.is_empty())
    }

    /// A note when content and version disagree: same name and version but
    /// different content (the edited list needs a version bump), or the same
    /// content under two versions.
    pub fn version_note(&self) -> Option<String> {
        if self.a.name != self.b.name {
            return None;
        }
        if !self.same_content() && self.a.version == self.b.version {
            Some(format!(
                "the content differs but both are version {}: bump the 'version' of the edited list",
                self.a.version
            ))
        } else if self.same_content() && self.a.version != self.b.version {
            Some(format!(
                "versions {} and {} have the same content",
                self.a.version, self.b.version
            ))
        } else {
            None
        }
    }
}

fn side(l: &CodeList) -> Side {
    Side {
        name: l.name.clone(),
        version: l.version.clone(),
        origin: l.origin.to_string(),
        checksum: l.checksum.clone(),
    }
}

fn change(what: impl Into<String>, before: &str, after: &str) -> Option<Change> {
    (before != after).then(|| Change {
        what: what.into(),
        before: before.to_string(),
        after: after.to_string(),
    })
}

fn number(x: i64) -> String {
    num(x, min_decimals(x))
}

/// Normalised code -> (line, source) per condition key.
fn codes_by_condition(l: &CodeList) -> BTreeMap<&str, BTreeMap<String, (CodeLine, &str)>> {
    let mut m: BTreeMap<&str, BTreeMap<String, (CodeLine, &str)>> = BTreeMap::new();
    for c in &l.conditions {
        m.entry(&c.key).or_default();
    }
    for e in &l.codes {
        let n = e.normalised();
        m.entry(&l.conditions[e.condition].key)
            .or_default()
            .entry(n.clone())
            .or_insert((
                CodeLine {
                    normalised: n,
                    written: e.text.clone(),
                    line: e.line,
                },
                &e.source,
            ));
    }
    m
}

fn bands(l: &CodeList) -> BTreeMap<String, &str> {
    let mut m = BTreeMap::new();
    for w in &l.weightings {
        for b in &w.bands {
            m.insert(
                format!(
                    "{} {} {} {}",
                    w.name,
                    b.name,
                    bound(b.lower, true),
                    bound(b.upper, false)
                ),
                b.source.as_str(),
            );
        }
    }
    m
}

fn ages(l: &CodeList) -> BTreeMap<String, &str> {
    l.age_points
        .iter()
        .map(|a| {
            let to = a.to.map_or("*".to_string(), |t| t.to_string());
            (
                format!("{}-{to} {}", a.from, number(a.points)),
                a.source.as_str(),
            )
        })
        .collect()
}

/// Adds to `added`/`removed` the keys only in `b`/`a`; for common keys whose
/// source differs, records a source change.
fn compare_keyed(
    a: &BTreeMap<String, &str>,
    b: &BTreeMap<String, &str>,
    kind: &str,
    added: &mut Vec<String>,
    removed: &mut Vec<String>,
    sources: &mut Vec<Change>,
) {
    for (k, sa) in a {
        match b.get(k) {
            None => removed.push(k.clone()),
            Some(sb) => sources.extend(change(format!("source of {kind} {k}"), sa, sb)),
        }
    }
    for k in b.keys() {
        if !a.contains_key(k) {
            added.push(k.clone());
        }
    }
}

/// Compares list `a` (before) with list `b` (after).
pub fn diff(a: &CodeList, b: &CodeList) -> ListDiff {
    let mut sources = Vec::new();
    let metadata: Vec<Change> = [
        change("name", &a.name, &b.name),
        change("version", &a.version, &b.version),
        change("title", &a.title, &b.title),
        change("editions", &a.editions.join("; "), &b.editions.join("; ")),
        change(
            "default weighting",
            &a.default_weighting,
            &b.default_weighting,
        ),
    ]
    .into_iter()
    .flatten()
    .collect();
    sources.extend(change("source of the list", &a.source, &b.source));

    // Conditions.
    let a_keys: Vec<&str> = a.conditions.iter().map(|c| c.key.as_str()).collect();
    let b_keys: Vec<&str> = b.conditions.iter().map(|c| c.key.as_str()).collect();
    let conditions_added: Vec<String> = b_keys
        .iter()
        .filter(|k| !a_keys.contains(k))
        .map(|k| k.to_string())
        .collect();
    let conditions_removed: Vec<String> = a_keys
        .iter()
        .filter(|k| !b_keys.contains(k))
        .map(|k| k.to_string())
        .collect();
    let common_a: Vec<&str> = a_keys
        .iter()
        .copied()
        .filter(|k| b_keys.contains(k))
        .collect();
    let common_b: Vec<&str> = b_keys
        .iter()
        .copied()
        .filter(|k| a_keys.contains(k))
        .collect();
    let mut labels_changed = Vec::new();
    for ca in &a.conditions {
        if let Some(cb) = b.conditions.iter().find(|c| c.key == ca.key) {
            labels_changed.extend(change(format!("label of {}", ca.key), &ca.label, &cb.label));
            let notes = |c: &super::Condition| {
                c.notes
                    .iter()
                    .map(|n| n.text.as_str())
                    .collect::<Vec<_>>()
                    .join(" | ")
            };
            labels_changed.extend(change(
                format!("notes of {}", ca.key),
                &notes(ca),
                &notes(cb),
            ));
            sources.extend(change(
                format!("source of condition {}", ca.key),
                &ca.source,
                &cb.source,
            ));
        }
    }

    // Codes.
    let ca = codes_by_condition(a);
    let cb = codes_by_condition(b);
    let empty = BTreeMap::new();
    let mut order: Vec<&str> = b_keys.clone();
    order.extend(a_keys.iter().filter(|k| !b_keys.contains(k)));
    let mut codes = Vec::new();
    for key in order {
        let ea = ca.get(key).unwrap_or(&empty);
        let eb = cb.get(key).unwrap_or(&empty);
        let removed: Vec<CodeLine> = ea
            .iter()
            .filter(|(n, _)| !eb.contains_key(*n))
            .map(|(_, (l, _))| l.clone())
            .collect();
        let added: Vec<CodeLine> = eb
            .iter()
            .filter(|(n, _)| !ea.contains_key(*n))
            .map(|(_, (l, _))| l.clone())
            .collect();
        for (n, (_, sa)) in ea {
            if let Some((_, sb)) = eb.get(n) {
                sources.extend(change(format!("source of code {n} of {key}"), sa, sb));
            }
        }
        if !removed.is_empty() || !added.is_empty() {
            codes.push(ConditionCodes {
                condition: key.to_string(),
                removed,
                added,
            });
        }
    }

    // Hierarchy.
    let pairs = |l: &CodeList| -> BTreeMap<Pair, String> {
        l.hierarchy
            .iter()
            .map(|h| {
                (
                    Pair {
                        superior: l.conditions[h.superior].key.clone(),
                        inferior: l.conditions[h.inferior].key.clone(),
                    },
                    h.source.clone(),
                )
            })
            .collect()
    };
    let (ha, hb) = (pairs(a), pairs(b));
    let hierarchy_added: Vec<Pair> = hb.keys().filter(|p| !ha.contains_key(p)).cloned().collect();
    let hierarchy_removed: Vec<Pair> = ha.keys().filter(|p| !hb.contains_key(p)).cloned().collect();
    for (p, sa) in &ha {
        if let Some(sb) = hb.get(p) {
            sources.extend(change(
                format!("source of {} supersedes {}", p.superior, p.inferior),
                sa,
                sb,
            ));
        }
    }

    // Weightings and weights.
    let weightings_added: Vec<String> = b
        .weightings
        .iter()
        .filter(|w| a.weighting(&w.name).is_none())
        .map(|w| w.name.clone())
        .collect();
    let weightings_removed: Vec<String> = a
        .weightings
        .iter()
        .filter(|w| b.weighting(&w.name).is_none())
        .map(|w| w.name.clone())
        .collect();
    let mut weightings_changed = Vec::new();
    let mut weights = Vec::new();
    for wa in &a.weightings {
        let Some(wb) = b.weighting(&wa.name) else {
            continue;
        };
        let n = &wa.name;
        weightings_changed.extend(change(format!("label of {n}"), &wa.label, &wb.label));
        weightings_changed.extend(change(
            format!("decimals printed by {n}"),
            &wa.decimals.to_string(),
            &wb.decimals.to_string(),
        ));
        sources.extend(change(
            format!("source of weighting {n}"),
            &wa.source,
            &wb.source,
        ));
        let mut keys: Vec<&str> = b_keys.clone();
        keys.extend(a_keys.iter().filter(|k| !b_keys.contains(k)));
        for key in keys {
            let va = a
                .condition_index(key)
                .map(|i| (wa.weights[i], &wa.weight_sources[i]));
            let vb = b
                .condition_index(key)
                .map(|i| (wb.weights[i], &wb.weight_sources[i]));
            if va.map(|v| v.0) != vb.map(|v| v.0) {
                weights.push(WeightChange {
                    weighting: n.clone(),
                    condition: key.to_string(),
                    before: va.map(|v| number(v.0)),
                    after: vb.map(|v| number(v.0)),
                });
            } else if let (Some((_, sa)), Some((_, sb))) = (va, vb) {
                sources.extend(change(format!("source of weight {n} {key}"), sa, sb));
            }
        }
    }

    let (mut bands_added, mut bands_removed) = (Vec::new(), Vec::new());
    compare_keyed(
        &bands(a),
        &bands(b),
        "band",
        &mut bands_added,
        &mut bands_removed,
        &mut sources,
    );
    let (mut age_points_added, mut age_points_removed) = (Vec::new(), Vec::new());
    compare_keyed(
        &ages(a),
        &ages(b),
        "age points",
        &mut age_points_added,
        &mut age_points_removed,
        &mut sources,
    );

    ListDiff {
        a: side(a),
        b: side(b),
        metadata,
        conditions_added,
        conditions_removed,
        labels_changed,
        condition_order_changed: common_a != common_b,
        codes,
        hierarchy_added,
        hierarchy_removed,
        weightings_added,
        weightings_removed,
        weightings_changed,
        weights,
        bands_added,
        bands_removed,
        age_points_added,
        age_points_removed,
        sources_changed: sources,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::lists::{parse, Origin};

    const BASE: &str = "list\ttiny\nversion\t1.0\ntitle\tTiny\nsource\tInvented\n\
default_weighting\tpoints\n\
condition\tone\tFirst\tInvented\ncondition\ttwo\tSecond\tInvented\n\
code\tI50.x\tone\tInvented\ncode\tI25.2\tone\tInvented\ncode\tI42.5-I42.9\ttwo\tInvented\n\
supersedes\ttwo\tone\tInvented\n\
weighting\tpoints\tPoints\tInvented\nweight\tpoints\tone\t1\nweight\tpoints\ttwo\t2\n\
band\tpoints\tlow\t*\t<2\tInvented\nband\tpoints\thigh\t>=2\t*\tInvented\n\
age_points\t65\t*\t1\tInvented\n";

    fn load(text: &str) -> CodeList {
        parse(text, Origin::File("t.tsv".into())).unwrap().list
    }

    #[test]
    fn condition_notes_are_content() {
        let b = BASE.to_string() + "condition_note\ttwo\tsecondary positions only\tInvented\n";
        let (la, lb) = (load(BASE), load(&b));
        assert_eq!(lb.conditions[1].notes[0].text, "secondary positions only");
        assert_ne!(la.checksum, lb.checksum);
        let d = diff(&la, &lb);
        assert_eq!(d.labels_changed.len(), 1);
        assert_eq!(d.labels_changed[0].what, "notes of two");
        assert_eq!(d.labels_changed[0].after, "secondary positions only");
        // The canonical text carries the note: it loads back the same.
        let back = load(&crate::lists::canonical_text(&lb));
        assert_eq!(back.checksum, lb.checksum);
        assert_eq!(
            back.conditions[1].notes,
            lb.conditions[1]
                .notes
                .iter()
                .map(|n| crate::lists::ConditionNote {
                    line: back.conditions[1].notes[0].line,
                    ..n.clone()
                })
                .collect::<Vec<_>>()
        );
        // A note for an undeclared condition, or without text, is an error.
        for bad in [
            "condition_note\tnine\tx\tInvented\n",
            "condition_note\ttwo\t\tInvented\n",
        ] {
            let e = parse(&(BASE.to_string() + bad), Origin::File("t.tsv".into())).unwrap_err();
            assert!(
                e.diagnostics[0].message.contains("condition_note"),
                "{:?}",
                e.diagnostics
            );
        }
    }

    #[test]
    fn identical_lists_have_no_changes() {
        let d = diff(&load(BASE), &load(BASE));
        assert!(d.same_content());
        assert!(!d.has_changes(), "{d:?}");
        assert_eq!(d.version_note(), None);
    }

    #[test]
    fn spelling_of_codes_and_weights_is_no_change() {
        let b = BASE
            .replace("I25.2\t", "I252\t")
            .replace("I50.x", "I50")
            .replace("\t2\nband", "\t2.0\nband");
        let d = diff(&load(BASE), &load(&b));
        // 2.0 changes the printed decimals, nothing else.
        assert!(d.codes.is_empty());
        assert!(d.weights.is_empty());
        assert_eq!(d.weightings_changed.len(), 1);
        assert_eq!(d.weightings_changed[0].what, "decimals printed by points");
    }

    #[test]
    fn a_deleted_code_line_shows_as_removed() {
        let b = BASE.replace("code\tI25.2\tone\tInvented\n", "");
        let d = diff(&load(BASE), &load(&b));
        assert_eq!(d.codes.len(), 1);
        assert_eq!(d.codes[0].condition, "one");
        assert_eq!(d.codes[0].removed.len(), 1);
        assert_eq!(d.codes[0].removed[0].normalised, "I252");
        assert_eq!(d.codes[0].removed[0].written, "I25.2");
        assert_eq!(d.codes[0].removed[0].line, 9);
        assert!(d.codes[0].added.is_empty());
        assert!(d.version_note().unwrap().contains("bump"));
    }

    #[test]
    fn every_kind_of_change_is_reported() {
        let b = BASE
            .replace("version\t1.0", "version\t1.1")
            .replace("code\tI42.5-I42.9\ttwo", "code\tI42.5-I42.8\ttwo")
            .replace("supersedes\ttwo\tone\tInvented\n", "")
            .replace("weight\tpoints\ttwo\t2\n", "weight\tpoints\ttwo\t3\n")
            .replace("condition\ttwo\tSecond", "condition\ttwo\tSecond one")
            .replace("band\tpoints\thigh\t>=2", "band\tpoints\thigh\t>=3")
            .replace("band\tpoints\tlow\t*\t<2", "band\tpoints\tlow\t*\t<3")
            .replace("age_points\t65\t*\t1\tInvented", "age_points\t65\t*\t2\tInvented")
            + "condition\tthree\tThird\tInvented\ncode\tR54\tthree\tInvented\nweight\tpoints\tthree\t1\n";
        let d = diff(&load(BASE), &load(&b));
        assert_eq!(d.metadata[0].what, "version");
        assert_eq!(d.conditions_added, ["three"]);
        assert_eq!(d.labels_changed.len(), 1);
        let two = d.codes.iter().find(|c| c.condition == "two").unwrap();
        assert_eq!(two.removed[0].normalised, "I425-I429");
        assert_eq!(two.added[0].normalised, "I425-I428");
        let three = d.codes.iter().find(|c| c.condition == "three").unwrap();
        assert_eq!(three.added[0].normalised, "R54");
        assert_eq!(
            d.hierarchy_removed,
            [Pair {
                superior: "two".into(),
                inferior: "one".into()
            }]
        );
        assert_eq!(d.weights.len(), 2);
        assert_eq!(d.weights[0].condition, "two");
        assert_eq!(d.weights[0].before.as_deref(), Some("2"));
        assert_eq!(d.weights[0].after.as_deref(), Some("3"));
        assert_eq!(d.weights[1].before, None);
        assert_eq!(d.bands_removed.len(), 2);
        assert_eq!(d.bands_added.len(), 2);
        assert_eq!(d.age_points_removed, ["65-* 1"]);
        assert_eq!(d.age_points_added, ["65-* 2"]);
        assert_eq!(d.version_note(), None);
        // And the other way round.
        let r = diff(&load(&b), &load(BASE));
        assert_eq!(r.conditions_removed, ["three"]);
        assert_eq!(r.hierarchy_added.len(), 1);
    }

    #[test]
    fn source_and_order_changes_are_reported() {
        let b = BASE
            .replace("code\tI25.2\tone\tInvented", "code\tI25.2\tone\tOwn review")
            .replace(
                "condition\tone\tFirst\tInvented\ncondition\ttwo\tSecond\tInvented\n",
                "condition\ttwo\tSecond\tInvented\ncondition\tone\tFirst\tInvented\n",
            );
        let d = diff(&load(BASE), &load(&b));
        assert!(d.condition_order_changed);
        assert_eq!(d.sources_changed.len(), 1);
        assert_eq!(d.sources_changed[0].what, "source of code I252 of one");
        assert!(d.has_changes());
    }
}

/// `lists diff` of two directories of lists: the lists of both paired by
/// name, and those present on one side only.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct DirDiff {
    /// The directories as given.
    pub a: String,
    pub b: String,
    /// One report per list name present on both sides, by name.
    pub lists: Vec<ListDiff>,
    /// Lists present only in `a` (removed) and only in `b` (added).
    pub only_in_a: Vec<OneSide>,
    pub only_in_b: Vec<OneSide>,
}

/// A list present on one side of a directory diff.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct OneSide {
    pub name: String,
    pub version: String,
    pub origin: String,
    pub checksum: String,
}

impl DirDiff {
    /// Whether any list differs or is present on one side only.
    pub fn has_changes(&self) -> bool {
        !self.only_in_a.is_empty()
            || !self.only_in_b.is_empty()
            || self.lists.iter().any(|d| d.has_changes())
    }
}

/// Loads every list of two directories (any error in either fails, as
/// [`super::load_dir`]) and pairs them by list name.
pub fn diff_dirs(
    a: &std::path::Path,
    b: &std::path::Path,
) -> Result<(DirDiff, Vec<super::Diagnostic>), super::ListError> {
    let left = super::load_dir(a)?;
    let right = super::load_dir(b)?;
    let mut warnings = Vec::new();
    for l in left.iter().chain(&right) {
        warnings.extend(l.warnings.iter().cloned());
    }
    let one = |l: &CodeList| OneSide {
        name: l.name.clone(),
        version: l.version.clone(),
        origin: l.origin.to_string(),
        checksum: l.checksum.clone(),
    };
    let mut names: Vec<&str> = left
        .iter()
        .chain(&right)
        .map(|l| l.list.name.as_str())
        .collect();
    names.sort_unstable();
    names.dedup();
    let mut out = DirDiff {
        a: a.display().to_string(),
        b: b.display().to_string(),
        lists: Vec::new(),
        only_in_a: Vec::new(),
        only_in_b: Vec::new(),
    };
    for name in names {
        let l = left.iter().find(|l| l.list.name == name).map(|l| &l.list);
        let r = right.iter().find(|l| l.list.name == name).map(|l| &l.list);
        match (l, r) {
            (Some(l), Some(r)) => out.lists.push(diff(l, r)),
            (Some(l), None) => out.only_in_a.push(one(l)),
            (None, Some(r)) => out.only_in_b.push(one(r)),
            (None, None) => {}
        }
    }
    Ok((out, warnings))
}

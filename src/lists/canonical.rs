//! Canonical content of a list and its checksum.
//!
//! The canonical text is what `morbus lists export` writes (without its
//! leading comment): header records, conditions in declaration order, codes
//! grouped by condition in code order, hierarchy, weightings with their
//! weights in condition order, age points and bands. Comments, blank lines,
//! spacing, the order of code lines and the spelling of codes (`I50.x` or
//! `I50`) do not change it; everything that can change a score or its
//! provenance does.

use sha2::{Digest, Sha256};

use super::{format_scaled, Bound, CodeList};

/// The fewest decimals that write `x` exactly.
pub(crate) fn min_decimals(x: i64) -> u32 {
    (0..4).find(|&d| x % 10i64.pow(4 - d) == 0).unwrap_or(4)
}

/// A band bound as written in a list (`*`, `>=5`, `<15`).
pub(crate) fn bound(b: Bound, lower: bool) -> String {
    let mut v = Vec::new();
    match b {
        Bound::Open => return "*".into(),
        Bound::Inclusive(x) => {
            v.extend_from_slice(if lower { b">=" } else { b"<=" });
            format_scaled(x, min_decimals(x), &mut v);
        }
        Bound::Exclusive(x) => {
            v.extend_from_slice(if lower { b">" } else { b"<" });
            format_scaled(x, min_decimals(x), &mut v);
        }
    }
    String::from_utf8(v).unwrap_or_default()
}

/// A scaled number as text with `decimals` decimals.
pub(crate) fn num(x: i64, decimals: u32) -> String {
    let mut v = Vec::new();
    format_scaled(x, decimals, &mut v);
    String::from_utf8(v).unwrap_or_default()
}

/// The canonical text of a list (tab-separated records, one per line).
pub fn canonical_text(list: &CodeList) -> String {
    let mut out = String::new();
    let mut rec = |fields: &[&str]| {
        let mut fields: Vec<&str> = fields.to_vec();
        while fields.len() > 1 && fields.last().is_some_and(|f| f.is_empty()) {
            fields.pop();
        }
        out.push_str(&fields.join("\t"));
        out.push('\n');
    };
    rec(&["list", &list.name]);
    rec(&["version", &list.version]);
    rec(&["title", &list.title]);
    for e in &list.editions {
        rec(&["edition", e]);
    }
    rec(&["source", &list.source]);
    rec(&["default_weighting", &list.default_weighting]);
    for c in &list.conditions {
        rec(&["condition", &c.key, &c.label, &c.source]);
    }
    for c in &list.conditions {
        for n in &c.notes {
            rec(&["condition_note", &c.key, &n.text, &n.source]);
        }
    }
    for (ci, c) in list.conditions.iter().enumerate() {
        let mut codes: Vec<_> = list.codes.iter().filter(|e| e.condition == ci).collect();
        codes.sort_by_key(|e| (e.first, e.last));
        for e in codes {
            rec(&["code", &e.normalised(), &c.key, &e.source]);
        }
    }
    for h in &list.hierarchy {
        rec(&[
            "supersedes",
            &list.conditions[h.superior].key,
            &list.conditions[h.inferior].key,
            &h.source,
        ]);
    }
    for w in &list.weightings {
        rec(&["weighting", &w.name, &w.label, &w.source]);
        for (ci, c) in list.conditions.iter().enumerate() {
            rec(&[
                "weight",
                &w.name,
                &c.key,
                &num(w.weights[ci], w.decimals),
                &w.weight_sources[ci],
            ]);
        }
        for b in &w.bands {
            rec(&[
                "band",
                &w.name,
                &b.name,
                &bound(b.lower, true),
                &bound(b.upper, false),
                &b.source,
            ]);
        }
    }
    for a in &list.age_points {
        let to = a.to.map_or("*".to_string(), |t| t.to_string());
        rec(&[
            "age_points",
            &a.from.to_string(),
            &to,
            &num(a.points, min_decimals(a.points)),
            &a.source,
        ]);
    }
    out
}

/// SHA-256 of the canonical text, lower-case hex.
pub fn checksum(list: &CodeList) -> String {
    let digest = Sha256::digest(canonical_text(list).as_bytes());
    digest.iter().map(|b| format!("{b:02x}")).collect()
}

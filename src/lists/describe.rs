//! Everything a list holds, ready to print: `morbus lists show`.
//!
//! [`describe`] turns a [`CodeList`] into plain strings and numbers (codes as
//! written and normalised, weights and bounds as decimal text) so that a
//! front end only lays them out. The description serialises to JSON.

use serde::Serialize;

use super::canonical::{bound, min_decimals, num};
use super::CodeList;

/// A list, described.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Description {
    pub name: String,
    pub version: String,
    pub title: String,
    pub editions: Vec<String>,
    pub source: String,
    /// Where the list was loaded from.
    pub origin: String,
    pub checksum: String,
    pub default_weighting: String,
    pub conditions: Vec<ConditionInfo>,
    pub hierarchy: Vec<HierarchyInfo>,
    pub weightings: Vec<WeightingInfo>,
    /// Age points, applied to every weighting.
    pub age_points: Vec<AgePointsInfo>,
}

/// A condition with its code entries, in file order.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ConditionInfo {
    pub key: String,
    pub label: String,
    pub source: String,
    pub line: usize,
    /// `condition_note` texts (recorded, not applied by scoring).
    pub notes: Vec<String>,
    pub codes: Vec<CodeInfo>,
}

/// One `code` record.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct CodeInfo {
    /// As written in the file (`I25.2`, `I42.5-I42.9`).
    pub written: String,
    /// Normalised (`I252`, `I425-I429`).
    pub normalised: String,
    pub source: String,
    pub line: usize,
}

/// `superior` supersedes `inferior`.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct HierarchyInfo {
    pub superior: String,
    pub inferior: String,
    pub source: String,
    pub line: usize,
}

#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct WeightingInfo {
    pub name: String,
    pub label: String,
    pub source: String,
    /// Whether this is the list's default weighting.
    pub default: bool,
    /// Decimals the weighting prints with.
    pub decimals: u32,
    /// One weight per condition, in condition order.
    pub weights: Vec<WeightInfo>,
    pub bands: Vec<BandInfo>,
}

#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct WeightInfo {
    pub condition: String,
    /// The weight as decimal text, with the weighting's decimals.
    pub value: String,
    /// The weight line's source (empty: the weighting's source applies).
    pub source: String,
}

#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct BandInfo {
    pub name: String,
    /// `*`, `>=X` or `>X`.
    pub lower: String,
    /// `*`, `<=X` or `<X`.
    pub upper: String,
    pub source: String,
}

#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct AgePointsInfo {
    pub from: u32,
    /// `None`: no upper limit.
    pub to: Option<u32>,
    pub points: String,
    pub source: String,
}

/// Describes a list.
pub fn describe(list: &CodeList) -> Description {
    let conditions = list
        .conditions
        .iter()
        .enumerate()
        .map(|(ci, c)| {
            let mut codes: Vec<CodeInfo> = list
                .codes
                .iter()
                .filter(|e| e.condition == ci)
                .map(|e| CodeInfo {
                    written: e.text.clone(),
                    normalised: e.normalised(),
                    source: e.source.clone(),
                    line: e.line,
                })
                .collect();
            codes.sort_by_key(|c| c.line);
            ConditionInfo {
                key: c.key.clone(),
                label: c.label.clone(),
                source: c.source.clone(),
                line: c.line,
                notes: c.notes.iter().map(|n| n.text.clone()).collect(),
                codes,
            }
        })
        .collect();
    let hierarchy = list
        .hierarchy
        .iter()
        .map(|h| HierarchyInfo {
            superior: list.conditions[h.superior].key.clone(),
            inferior: list.conditions[h.inferior].key.clone(),
            source: h.source.clone(),
            line: h.line,
        })
        .collect();
    let weightings = list
        .weightings
        .iter()
        .map(|w| WeightingInfo {
            name: w.name.clone(),
            label: w.label.clone(),
            source: w.source.clone(),
            default: w.name == list.default_weighting,
            decimals: w.decimals,
            weights: list
                .conditions
                .iter()
                .enumerate()
                .map(|(ci, c)| WeightInfo {
                    condition: c.key.clone(),
                    value: num(w.weights[ci], w.decimals),
                    source: w.weight_sources[ci].clone(),
                })
                .collect(),
            bands: w
                .bands
                .iter()
                .map(|b| BandInfo {
                    name: b.name.clone(),
                    lower: bound(b.lower, true),
                    upper: bound(b.upper, false),
                    source: b.source.clone(),
                })
                .collect(),
        })
        .collect();
    let age_points = list
        .age_points
        .iter()
        .map(|a| AgePointsInfo {
            from: a.from,
            to: a.to,
            points: num(a.points, min_decimals(a.points)),
            source: a.source.clone(),
        })
        .collect();
    Description {
        name: list.name.clone(),
        version: list.version.clone(),
        title: list.title.clone(),
        editions: list.editions.clone(),
        source: list.source.clone(),
        origin: list.origin.to_string(),
        checksum: list.checksum.clone(),
        default_weighting: list.default_weighting.clone(),
        conditions,
        hierarchy,
        weightings,
        age_points,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::lists::{parse, Origin};

    const TINY: &str =
        "list\ttiny\nversion\t1.0\ntitle\tTiny\nedition\tICD-10 (WHO)\nsource\tInvented\n\
default_weighting\tpoints\n\
condition\tone\tFirst\tInvented\ncondition\ttwo\tSecond\tInvented\n\
code\tI50.x\tone\tInvented\ncode\tI42.5-I42.9\ttwo\tInvented\ncode\tI25.2\tone\tInvented\n\
supersedes\ttwo\tone\tInvented\n\
weighting\tpoints\tPoints\tInvented\nweight\tpoints\tone\t1\nweight\tpoints\ttwo\t2.5\tOwn\n\
weighting\tcount\tCount\tInvented\nweight\tcount\tone\t1\nweight\tcount\ttwo\t1\n\
band\tpoints\tlow\t*\t<2\tInvented\nband\tpoints\thigh\t>=2\t*\tInvented\n\
age_points\t65\t*\t1\tInvented\n";

    #[test]
    fn describes_every_part() {
        let l = parse(TINY, Origin::File("tiny.tsv".into())).unwrap().list;
        let d = describe(&l);
        assert_eq!(d.name, "tiny");
        assert_eq!(d.origin, "tiny.tsv");
        assert_eq!(d.checksum, l.checksum);
        assert_eq!(d.conditions.len(), 2);
        let one = &d.conditions[0];
        assert_eq!(
            one.codes
                .iter()
                .map(|c| (c.written.as_str(), c.normalised.as_str()))
                .collect::<Vec<_>>(),
            [("I50.x", "I50"), ("I25.2", "I252")]
        );
        assert_eq!(d.conditions[1].codes[0].normalised, "I425-I429");
        assert_eq!(d.hierarchy[0].superior, "two");
        assert_eq!(d.hierarchy[0].inferior, "one");
        let w = &d.weightings[0];
        assert!(w.default);
        assert!(!d.weightings[1].default);
        assert_eq!(w.weights[0].value, "1.0");
        assert_eq!(w.weights[1].value, "2.5");
        assert_eq!(w.weights[1].source, "Own");
        assert_eq!(w.bands[0].upper, "<2");
        assert_eq!(w.bands[1].lower, ">=2");
        assert_eq!(d.age_points[0].to, None);
        assert_eq!(d.age_points[0].points, "1");
        let json = serde_json::to_string(&d).unwrap();
        assert!(json.contains("\"normalised\":\"I252\""));
    }
}

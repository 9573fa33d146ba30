//! Checks of the built-in lists and the scorer against the published sources.
//!
//! The expected values below were copied from the publications from
//! memory (no copy was at hand while writing them), independently of the
//! list files; where the two copies disagree a test fails and the
//! publication decides.

use morbus::code::{read_code, Reading};
use morbus::lists::{builtin, Catalogue, CodeList, SCALE};
use morbus::score::{Engine, IndexSpec, ScoreOptions};

fn list(name: &str) -> &'static CodeList {
    builtin::all()
        .iter()
        .find(|l| l.name == name)
        .unwrap_or_else(|| panic!("built-in list {name} missing"))
}

fn weights(list: &CodeList, weighting: &str) -> Vec<(String, f64)> {
    let w = list.weighting(weighting).expect("weighting");
    list.conditions
        .iter()
        .zip(&w.weights)
        .map(|(c, &v)| (c.key.clone(), v as f64 / SCALE as f64))
        .collect()
}

fn engine(spec: &str, hierarchy: bool) -> Engine {
    Engine::new(
        &Catalogue::builtin(),
        &IndexSpec::parse_many(spec).unwrap(),
        ScoreOptions {
            hierarchy,
            flags: true,
            age: true,
        },
    )
    .unwrap()
}

/// Score of one unit holding `codes`, in points.
fn score(spec: &str, codes: &[&str], hierarchy: bool) -> f64 {
    let e = engine(spec, hierarchy);
    let mut u = e.unit();
    for c in codes {
        e.add_raw(&mut u.bits, c.as_bytes());
    }
    e.apply_hierarchy(&mut u.bits, &mut u.scratch);
    e.score(&u.bits, 0) as f64 / SCALE as f64
}

/// One code claimed by each condition: the first code of its first entry.
fn one_code_per_condition(list: &CodeList) -> Vec<String> {
    (0..list.conditions.len())
        .map(|ci| {
            list.codes
                .iter()
                .find(|e| e.condition == ci)
                .map(|e| e.first.to_string())
                .expect("every condition has a code")
        })
        .collect()
}

fn as_refs(v: &[String]) -> Vec<&str> {
    v.iter().map(String::as_str).collect()
}

#[test]
fn builtin_lists_load_without_errors() {
    let names: Vec<&str> = builtin::all().iter().map(|l| l.name.as_str()).collect();
    assert_eq!(names, ["charlson", "elixhauser", "hfrs"]);
    // Only warnings, and only the overlaps the published Elixhauser table
    // itself has (Quan et al., Med Care 2005;43:1130-9, Table 2: e.g. I11.0
    // is both heart failure and complicated hypertension, K70.0 both liver
    // disease and alcohol abuse).
    for p in builtin::problems() {
        assert_eq!(p.severity, morbus::lists::Severity::Warning, "{p}");
        assert!(p.file.contains("elixhauser"), "{p}");
        assert!(p.message.contains("also claimed"), "{p}");
    }
}

#[test]
fn charlson_has_17_conditions_and_the_1987_weights() {
    // Quan et al., Med Care 2005;43:1130-9, Table 1: 17 conditions.
    let l = list("charlson");
    assert_eq!(l.conditions.len(), 17);
    // Charlson et al., J Chronic Dis 1987;40:373-83 (weights 1, 2, 3, 6),
    // from memory.
    let expected = [
        ("myocardial_infarction", 1.0),
        ("congestive_heart_failure", 1.0),
        ("peripheral_vascular_disease", 1.0),
        ("cerebrovascular_disease", 1.0),
        ("dementia", 1.0),
        ("chronic_pulmonary_disease", 1.0),
        ("rheumatic_disease", 1.0),
        ("peptic_ulcer_disease", 1.0),
        ("liver_disease_mild", 1.0),
        ("diabetes_without_chronic_complication", 1.0),
        ("diabetes_with_chronic_complication", 2.0),
        ("hemiplegia_or_paraplegia", 2.0),
        ("renal_disease", 2.0),
        ("any_malignancy", 2.0),
        ("liver_disease_moderate_severe", 3.0),
        ("metastatic_solid_tumour", 6.0),
        ("hiv_disease", 6.0),
    ];
    let got = weights(l, "charlson1987");
    let exp: Vec<(String, f64)> = expected.iter().map(|(k, v)| (k.to_string(), *v)).collect();
    assert_eq!(got, exp);
}

#[test]
fn charlson_quan2011_weights() {
    // Quan et al., Am J Epidemiol 2011;173:676-82, updated weights, from
    // memory.
    let expected = [
        ("myocardial_infarction", 0.0),
        ("congestive_heart_failure", 2.0),
        ("peripheral_vascular_disease", 0.0),
        ("cerebrovascular_disease", 0.0),
        ("dementia", 2.0),
        ("chronic_pulmonary_disease", 1.0),
        ("rheumatic_disease", 1.0),
        ("peptic_ulcer_disease", 0.0),
        ("liver_disease_mild", 2.0),
        ("diabetes_without_chronic_complication", 0.0),
        ("diabetes_with_chronic_complication", 1.0),
        ("hemiplegia_or_paraplegia", 2.0),
        ("renal_disease", 1.0),
        ("any_malignancy", 2.0),
        ("liver_disease_moderate_severe", 4.0),
        ("metastatic_solid_tumour", 6.0),
        ("hiv_disease", 4.0),
    ];
    let exp: Vec<(String, f64)> = expected.iter().map(|(k, v)| (k.to_string(), *v)).collect();
    assert_eq!(weights(list("charlson"), "quan2011"), exp);
    // The count weighting gives one point per condition (common practice).
    assert!(weights(list("charlson"), "count")
        .iter()
        .all(|(_, v)| *v == 1.0));
}

#[test]
fn charlson_published_maxima() {
    let codes = one_code_per_condition(list("charlson"));
    let codes = as_refs(&codes);
    // With the three hierarchies the Charlson 1987 weights reach at most 29
    // (Charlson et al., J Chronic Dis 1987;40:373-83: 33 points over all 17
    // conditions, less mild liver 1, uncomplicated diabetes 1 and any
    // malignancy 2 superseded), from memory.
    assert_eq!(score("charlson:charlson1987", &codes, true), 29.0);
    assert_eq!(score("charlson:charlson1987", &codes, false), 33.0);
    // Quan et al., Am J Epidemiol 2011;173:676-82: maximum 24, from memory.
    assert_eq!(score("charlson:quan2011", &codes, true), 24.0);
    assert_eq!(score("charlson:count", &codes, true), 14.0);
}

#[test]
fn elixhauser_has_31_conditions_and_van_walraven_weights() {
    // Quan et al., Med Care 2005;43:1130-9, Table 2: 31 conditions with
    // hypertension split into uncomplicated and complicated.
    let l = list("elixhauser");
    assert_eq!(l.conditions.len(), 31);
    // van Walraven et al., Med Care 2009;47:626-33, from memory.
    let expected = [
        ("congestive_heart_failure", 7.0),
        ("cardiac_arrhythmia", 5.0),
        ("valvular_disease", -1.0),
        ("pulmonary_circulation_disorder", 4.0),
        ("peripheral_vascular_disorder", 2.0),
        ("hypertension_uncomplicated", 0.0),
        ("hypertension_complicated", 0.0),
        ("paralysis", 7.0),
        ("other_neurological_disorder", 6.0),
        ("chronic_pulmonary_disease", 3.0),
        ("diabetes_uncomplicated", 0.0),
        ("diabetes_complicated", 0.0),
        ("hypothyroidism", 0.0),
        ("renal_failure", 5.0),
        ("liver_disease", 11.0),
        ("peptic_ulcer_disease_without_bleeding", 0.0),
        ("hiv_disease", 0.0),
        ("lymphoma", 9.0),
        ("metastatic_cancer", 12.0),
        ("solid_tumour_without_metastasis", 4.0),
        ("rheumatoid_arthritis_collagen_vascular", 0.0),
        ("coagulopathy", 3.0),
        ("obesity", -4.0),
        ("weight_loss", 6.0),
        ("fluid_electrolyte_disorder", 5.0),
        ("blood_loss_anaemia", -2.0),
        ("deficiency_anaemia", -2.0),
        ("alcohol_abuse", 0.0),
        ("drug_abuse", -7.0),
        ("psychosis", 0.0),
        ("depression", -3.0),
    ];
    let exp: Vec<(String, f64)> = expected.iter().map(|(k, v)| (k.to_string(), *v)).collect();
    assert_eq!(weights(l, "vanwalraven2009"), exp);
}

#[test]
fn van_walraven_range_over_all_flags() {
    // van Walraven et al., Med Care 2009;47:626-33: the score ranges from -19
    // to 89 over all 31 flags (hierarchy off), from memory.
    let l = list("elixhauser");
    let w = weights(l, "vanwalraven2009");
    let codes = one_code_per_condition(l);
    let negative: Vec<&str> = codes
        .iter()
        .zip(&w)
        .filter(|(_, (_, v))| *v < 0.0)
        .map(|(c, _)| c.as_str())
        .collect();
    let positive: Vec<&str> = codes
        .iter()
        .zip(&w)
        .filter(|(_, (_, v))| *v > 0.0)
        .map(|(c, _)| c.as_str())
        .collect();
    assert_eq!(score("elixhauser:vanwalraven2009", &negative, false), -19.0);
    assert_eq!(score("elixhauser:vanwalraven2009", &positive, false), 89.0);
    // With the hierarchy, metastatic cancer supersedes solid tumour (4).
    assert_eq!(score("elixhauser:vanwalraven2009", &positive, true), 85.0);
}

/// Gilbert et al., Lancet 2018;391:1775-82, the table of 109 ICD-10
/// categories and their points, from memory.
const HFRS_POINTS: &[(&str, f64)] = &[
    ("F00", 7.1),
    ("G81", 4.4),
    ("G30", 4.0),
    ("I69", 3.7),
    ("R29", 3.6),
    ("N39", 3.2),
    ("F05", 3.2),
    ("W19", 3.2),
    ("S00", 3.2),
    ("R31", 3.0),
    ("B96", 2.9),
    ("R41", 2.7),
    ("R26", 2.6),
    ("I67", 2.6),
    ("R56", 2.6),
    ("R40", 2.5),
    ("T83", 2.4),
    ("S06", 2.4),
    ("S42", 2.3),
    ("E87", 2.3),
    ("M25", 2.3),
    ("E86", 2.3),
    ("R54", 2.2),
    ("Z50", 2.1),
    ("F03", 2.1),
    ("W18", 2.1),
    ("Z75", 2.0),
    ("F01", 2.0),
    ("S80", 2.0),
    ("L03", 2.0),
    ("H54", 1.9),
    ("E53", 1.9),
    ("Z60", 1.8),
    ("G20", 1.8),
    ("R55", 1.8),
    ("S22", 1.8),
    ("K59", 1.8),
    ("N17", 1.8),
    ("L89", 1.7),
    ("Z22", 1.7),
    ("B95", 1.7),
    ("L97", 1.6),
    ("R44", 1.6),
    ("K26", 1.6),
    ("I95", 1.6),
    ("N19", 1.6),
    ("A41", 1.6),
    ("Z87", 1.5),
    ("J96", 1.5),
    ("X59", 1.5),
    ("M19", 1.5),
    ("G40", 1.5),
    ("M81", 1.4),
    ("S72", 1.4),
    ("S32", 1.4),
    ("E16", 1.4),
    ("R94", 1.4),
    ("N18", 1.4),
    ("R33", 1.3),
    ("R69", 1.3),
    ("N28", 1.3),
    ("R32", 1.2),
    ("G31", 1.2),
    ("Y95", 1.2),
    ("S09", 1.2),
    ("R45", 1.2),
    ("G45", 1.2),
    ("Z74", 1.1),
    ("M79", 1.1),
    ("W06", 1.1),
    ("S01", 1.1),
    ("A04", 1.1),
    ("A09", 1.1),
    ("J18", 1.1),
    ("J69", 1.0),
    ("R47", 1.0),
    ("E55", 1.0),
    ("Z93", 1.0),
    ("R02", 1.0),
    ("R63", 0.9),
    ("H91", 0.9),
    ("W10", 0.9),
    ("W01", 0.9),
    ("E05", 0.9),
    ("M41", 0.9),
    ("R13", 0.8),
    ("Z99", 0.8),
    ("U80", 0.8),
    ("M80", 0.8),
    ("K92", 0.8),
    ("I63", 0.8),
    ("N20", 0.7),
    ("F10", 0.7),
    ("Y84", 0.7),
    ("R00", 0.7),
    ("J22", 0.7),
    ("Z73", 0.6),
    ("R79", 0.6),
    ("Z91", 0.5),
    ("S51", 0.5),
    ("F32", 0.5),
    ("M48", 0.5),
    ("E83", 0.4),
    ("M15", 0.4),
    ("D64", 0.4),
    ("L08", 0.4),
    ("R11", 0.3),
    ("K52", 0.3),
    ("R50", 0.1),
];

#[test]
fn hfrs_109_categories_with_their_points() {
    // Gilbert et al., Lancet 2018;391:1775-82: 109 categories, 0.1 to 7.1.
    assert_eq!(HFRS_POINTS.len(), 109);
    let l = list("hfrs");
    assert_eq!(l.conditions.len(), 109);
    for (code, points) in HFRS_POINTS {
        // Each category alone scores its points, and its subcodes too.
        assert_eq!(score("hfrs", &[code], true), *points, "{code}");
        assert_eq!(
            score("hfrs", &[&format!("{code}.9")], true),
            *points,
            "{code}.9"
        );
    }
    let max = HFRS_POINTS.iter().map(|p| p.1).fold(f64::MIN, f64::max);
    let min = HFRS_POINTS.iter().map(|p| p.1).fold(f64::MAX, f64::min);
    assert_eq!((min, max), (0.1, 7.1));
    // Each category counts once however many of its codes a unit has.
    assert_eq!(score("hfrs", &["F00.0", "F00.1", "F00.9"], true), 7.1);
    // All 109 together: the exact sum of the published points.
    let all: Vec<&str> = HFRS_POINTS.iter().map(|p| p.0).collect();
    let total: i64 = HFRS_POINTS
        .iter()
        .map(|p| (p.1 * 10.0).round() as i64)
        .sum();
    assert_eq!(score("hfrs", &all, true), total as f64 / 10.0);
}

#[test]
fn hfrs_bands() {
    // Gilbert et al., Lancet 2018;391:1775-82: low < 5, intermediate 5-15,
    // high > 15.
    let w = list("hfrs").weighting("gilbert2018").unwrap();
    let band = |points: f64| w.band_of((points * SCALE as f64).round() as i64).unwrap();
    assert_eq!(band(0.0), "low");
    assert_eq!(band(4.9), "low");
    assert_eq!(band(5.0), "intermediate");
    assert_eq!(band(15.0), "intermediate");
    assert_eq!(band(15.1), "high");
    assert_eq!(band(40.0), "high");
}

#[test]
fn charlson_age_points() {
    // Charlson et al., J Clin Epidemiol 1994;47:1245-51: one point per decade
    // from 50 (50-59 1, 60-69 2, 70-79 3, 80 and over 4), from memory.
    let l = list("charlson");
    for (age, points) in [
        (0, 0),
        (49, 0),
        (50, 1),
        (59, 1),
        (60, 2),
        (69, 2),
        (70, 3),
        (79, 3),
        (80, 4),
        (104, 4),
    ] {
        assert_eq!(l.points_for_age(age), points * SCALE, "age {age}");
    }
}

/// Hand-worked episodes, with the codes' conditions per Quan et al., Med Care
/// 2005;43:1130-9, Tables 1 and 2.
#[test]
fn hand_worked_episodes() {
    // Acute MI (I21.4), type 2 diabetes with renal complication (E11.2) and
    // without (E11.9), chronic kidney disease stage 4 (N18.4).
    // Charlson 1987: MI 1 + diabetes with complications 2 (supersedes
    // without) + renal 2 = 5. Quan 2011: 0 + 1 + 1 = 2.
    let ep = ["I21.4", "E11.2", "E11.9", "N18.4"];
    assert_eq!(score("charlson:charlson1987", &ep, true), 5.0);
    assert_eq!(score("charlson:charlson1987", &ep, false), 6.0);
    assert_eq!(score("charlson:quan2011", &ep, true), 2.0);
    // Elixhauser: diabetes complicated (0, supersedes uncomplicated) + renal
    // failure 5 = 5 (van Walraven et al., Med Care 2009;47:626-33).
    assert_eq!(score("elixhauser", &ep, true), 5.0);

    // Alcoholic cirrhosis (K70.3) and oesophageal varices with bleeding
    // (I85.0): Charlson mild liver (K70.3) superseded by moderate/severe
    // (I85.0): 1987 weights 3, Quan 2011 4. Elixhauser: liver disease 11
    // (both codes), alcohol abuse 0 (K70.3): 11.
    let ep = ["K70.3", "I85.0"];
    assert_eq!(score("charlson:charlson1987", &ep, true), 3.0);
    assert_eq!(score("charlson:quan2011", &ep, true), 4.0);
    assert_eq!(score("charlson:count", &ep, false), 2.0);
    assert_eq!(score("elixhauser", &ep, true), 11.0);
    assert_eq!(score("elixhauser:count", &ep, true), 2.0);

    // Colon cancer (C18.7) with liver metastasis (C78.7): Charlson any
    // malignancy superseded by metastatic: 6 (1987). Elixhauser: metastatic
    // 12, solid tumour superseded: 12; without hierarchy 16.
    let ep = ["C18.7", "C78.7"];
    assert_eq!(score("charlson:charlson1987", &ep, true), 6.0);
    assert_eq!(score("charlson:charlson1987", &ep, false), 8.0);
    assert_eq!(score("elixhauser", &ep, true), 12.0);
    assert_eq!(score("elixhauser", &ep, false), 16.0);

    // Hypertensive heart disease with heart failure (I11.0) and essential
    // hypertension (I10): Elixhauser heart failure 7 + complicated
    // hypertension 0 (uncomplicated superseded): count 2, points 7.
    let ep = ["I11.0", "I10"];
    assert_eq!(score("elixhauser:count", &ep, true), 2.0);
    assert_eq!(score("elixhauser:count", &ep, false), 3.0);
    assert_eq!(score("elixhauser", &ep, true), 7.0);

    // Frailty: dementia in Alzheimer's disease (F00.1) 7.1, fall (W19) 3.2,
    // urinary tract infection (N39.0) 3.2, dehydration/volume depletion
    // (E86) 2.3: 15.8, band high (Gilbert et al., Lancet 2018;391:1775-82).
    let ep = ["F00.1", "W19", "N39.0", "E86"];
    assert_eq!(score("hfrs", &ep, true), 15.8);

    // Codes that claim nothing score zero everywhere.
    let ep = ["J06.9", "Z38.0"];
    for spec in [
        "charlson:charlson1987",
        "charlson:quan2011",
        "elixhauser",
        "hfrs",
    ] {
        assert_eq!(score(spec, &ep, true), 0.0, "{spec}");
    }
}

#[test]
fn prefix_matching_and_range_ends() {
    // I42.5-I42.9 (heart failure in Quan et al. 2005, Tables 1 and 2) claims
    // I42.5 and I42.9 but not I42.1; I42.0 is listed on its own.
    for (code, hf) in [
        ("I42.5", 1.0),
        ("I42.9", 1.0),
        ("I42.1", 0.0),
        ("I42.0", 1.0),
    ] {
        assert_eq!(score("charlson:count", &[code], true), hf, "{code}");
    }
    // I25.2 (old MI) but not I25.1 (Quan et al. 2005, Table 1).
    assert_eq!(score("charlson:count", &["I25.2"], true), 1.0);
    assert_eq!(score("charlson:count", &["I25.1"], true), 0.0);
    // A 3-character entry claims every longer code below it.
    assert_eq!(score("charlson:count", &["I50.9"], true), 1.0);
    assert_eq!(score("charlson:count", &["I509"], true), 1.0);
    assert_eq!(score("charlson:count", &["I5091"], true), 1.0);
    // A 4-character entry does not claim its 3-character category.
    assert_eq!(score("charlson:count", &["I25"], true), 0.0);
}

#[test]
fn code_reading_edge_cases_score_like_clean_codes() {
    // Spelling variants of the same codes give the same score (code shapes:
    // WHO ICD-10 and ICD-10-CM conventions, common practice).
    let clean = score("charlson:charlson1987", &["I21.9", "E11.2", "C78.0"], true);
    let messy = score(
        "charlson:charlson1987",
        &[" i219 ", "E11.2\u{2020}", "C78.0*", "I10X", "E11.2-", "I2"],
        true,
    );
    assert_eq!(clean, messy);
    assert!(matches!(read_code(b"I2"), Reading::Invalid));
}

#[test]
fn labels_follow_the_cited_publications() {
    // Condition labels as the publications print them (from memory):
    // Quan et al., Med Care 2005;43:1130-9, Tables 1 and 2 (American
    // spelling); Gilbert et al., Lancet 2018;391:1775-82, table of the 109
    // ICD-10 codes (A41 printed "Other septicaemia").
    let label = |l: &str, key: &str| {
        let list = list(l);
        list.conditions[list.condition_index(key).expect(key)]
            .label
            .clone()
    };
    assert_eq!(
        label("charlson", "metastatic_solid_tumour"),
        "Metastatic solid tumor"
    );
    assert_eq!(
        label("charlson", "any_malignancy"),
        "Any malignancy, including lymphoma and leukemia, except malignant neoplasm of skin"
    );
    assert_eq!(
        label("elixhauser", "solid_tumour_without_metastasis"),
        "Solid tumor without metastasis"
    );
    assert_eq!(
        label("elixhauser", "blood_loss_anaemia"),
        "Blood loss anemia"
    );
    assert_eq!(
        label("elixhauser", "deficiency_anaemia"),
        "Deficiency anemia"
    );
    assert_eq!(label("hfrs", "other_sepsis"), "Other septicaemia (A41)");
}

#[test]
fn hfrs_secondary_position_notes_are_recorded_not_applied() {
    // The categories ICD-10 reserves for secondary diagnosis positions
    // (supplementary agent, resistance and nosocomial codes, external
    // causes: WHO ICD-10 Volume 2 rules for morbidity coding, from memory)
    // among the 109 of Gilbert et al., Lancet 2018;391:1775-82.
    let hfrs = list("hfrs");
    let mut noted: Vec<String> = hfrs
        .conditions
        .iter()
        .enumerate()
        .filter(|(_, c)| !c.notes.is_empty())
        .map(|(ci, _)| {
            hfrs.codes
                .iter()
                .find(|e| e.condition == ci)
                .unwrap()
                .first
                .to_string()
        })
        .collect();
    noted.sort();
    assert_eq!(
        noted,
        ["B95", "B96", "U80", "W01", "W06", "W10", "W18", "W19", "X59", "Y84", "Y95"]
    );
    for c in hfrs.conditions.iter().filter(|c| !c.notes.is_empty()) {
        assert!(
            c.notes[0]
                .text
                .starts_with("secondary diagnosis positions only"),
            "{}",
            c.key
        );
    }
    // Not applied: W19 (unspecified fall, 3.2 points; Gilbert et al. 2018,
    // from memory) scores alone, as the only (first) code of an episode.
    assert_eq!(score("hfrs", &["W19"], true), 3.2);
    assert_eq!(score("hfrs", &["B96.2"], true), 2.9);
}

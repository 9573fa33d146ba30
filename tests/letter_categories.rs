//! ICD-10-CM letter categories against the built-in lists.
//!
//! ICD-10-CM has a few three-character categories whose third character is
//! a letter (ICD-10-CM tabular list: C4A Merkel cell carcinoma, C7A
//! malignant neuroendocrine tumours, C7B secondary neuroendocrine tumours,
//! D3A benign neuroendocrine tumours, M1A chronic gout, Z3A weeks of
//! gestation, among others; the codes below were picked from that list from
//! memory; the test below checks them against the compiled ICD-10-CM set,
//! which `python/tests/test_editions.py` checks against the
//! `simple-icd-10-cm` package). In character order they fall inside numeric ranges
//! of the WHO-based published tables (`C7A` between `C77` and `C80`,
//! `C4A` between `C45` and `C58`). The rule of this project
//! (`code-lists/FORMAT.md`): a range claims a letter in a position only when
//! one of its ends has a letter there, so the built-in lists, transcribed
//! from tables of WHO ICD-10 codes, claim none of these categories.

use morbus::lists::{builtin, parse, Catalogue, Origin};
use morbus::score::{Engine, IndexSpec, ScoreOptions, Value};

/// One code of each letter category (ICD-10-CM tabular list, from memory).
const LETTER_CODES: &[&str] = &[
    "C7A.1",    // malignant poorly differentiated neuroendocrine tumours
    "C7A.010",  // malignant carcinoid tumour of the duodenum
    "C7B.00",   // secondary carcinoid tumours, unspecified site
    "C7B.1",    // secondary Merkel cell carcinoma
    "C4A.9",    // Merkel cell carcinoma, unspecified
    "D3A.00",   // benign carcinoid tumour of unspecified site
    "M1A.00X0", // idiopathic chronic gout, unspecified site, without tophus
    "Z3A.20",   // 20 weeks gestation of pregnancy
];

fn engine_for(catalogue: &Catalogue, spec: &str) -> Engine {
    Engine::new(
        catalogue,
        &IndexSpec::parse_many(spec).unwrap(),
        ScoreOptions {
            hierarchy: true,
            flags: true,
            age: false,
        },
    )
    .unwrap()
}

/// Every value of a unit holding `codes` (scores, bands, flags).
fn values(engine: &Engine, codes: &[&str]) -> Vec<Value> {
    let mut u = engine.unit();
    for c in codes {
        engine.add_raw(&mut u.bits, c.as_bytes());
    }
    engine.apply_hierarchy(&mut u.bits, &mut u.scratch);
    let mut out = Vec::new();
    engine.values(&u.bits, None, &mut out);
    out
}

fn flags_set(engine: &Engine, codes: &[&str]) -> usize {
    values(engine, codes)
        .iter()
        .filter(|v| matches!(v, Value::Flag(true)))
        .count()
}

/// Every (list, weighting) of the built-in catalogue.
fn every_builtin_spec() -> Vec<String> {
    builtin::all()
        .iter()
        .flat_map(|l| {
            l.weightings
                .iter()
                .map(move |w| format!("{}:{}", l.name, w.name))
        })
        .collect()
}

#[test]
fn the_letter_codes_are_icd10cm_codes_and_not_who_ones() {
    use morbus::editions::{existence, Edition, Existence};
    for code in LETTER_CODES {
        let morbus::code::Reading::Valid(c) = morbus::code::read_code(code.as_bytes()) else {
            panic!("{code} reads as a code");
        };
        assert_eq!(existence(&c, Edition::Cm), Existence::Known, "{code}");
        assert_eq!(existence(&c, Edition::Who), Existence::Unknown, "{code}");
    }
}

#[test]
fn no_builtin_list_or_weighting_claims_a_letter_category() {
    let catalogue = Catalogue::builtin();
    let specs = every_builtin_spec();
    assert!(specs.len() >= 6, "{specs:?}");
    for spec in &specs {
        let e = engine_for(&catalogue, spec);
        let empty = values(&e, &[]);
        for code in LETTER_CODES {
            assert_eq!(flags_set(&e, &[code]), 0, "{spec}: {code} sets a flag");
            assert_eq!(values(&e, &[code]), empty, "{spec}: {code} changes a value");
        }
    }
    // And no list entry claims one, by the library's own predicate.
    for list in builtin::all() {
        for code in LETTER_CODES {
            let morbus::code::Reading::Valid(c) = morbus::code::read_code(code.as_bytes()) else {
                panic!("{code} reads as a code");
            };
            assert!(list.conditions_of(&c).is_empty(), "{}: {code}", list.name);
        }
    }
}

#[test]
fn the_neighbouring_numeric_categories_still_count() {
    // The test above must be able to fail: the numeric neighbours of the
    // letter categories are claimed. Quan et al., Med Care 2005;43:1130-9,
    // Table 1 (Charlson, from memory): C77-C80 metastatic solid tumour,
    // C43 and C45-C58 any malignancy; charlson1987 weights (Charlson et al.,
    // J Chronic Dis 1987;40:373-83, from memory): metastatic 6, malignancy 2.
    let catalogue = Catalogue::builtin();
    let e = engine_for(&catalogue, "charlson:charlson1987");
    let score = |codes: &[&str]| match values(&e, codes)[0] {
        Value::Score { scaled, .. } => scaled / morbus::lists::SCALE,
        ref v => panic!("{v:?}"),
    };
    assert_eq!(score(&["C78.0"]), 6);
    assert_eq!(score(&["C80.1"]), 6);
    assert_eq!(score(&["C50.9"]), 2);
    assert_eq!(score(&["C44.9"]), 0); // C44 (other skin) is not in the table
                                      // A primary neuroendocrine tumour (C7A.1) no longer counts as metastatic
                                      // and no longer suppresses the malignancy of C50.9 through the hierarchy.
    assert_eq!(score(&["C7A.1"]), 0);
    assert_eq!(score(&["C50.9", "C7A.1"]), 2);
    assert_eq!(score(&["C50.9", "C78.0"]), 6);
}

fn user_list(codes: &str) -> Catalogue {
    let text = format!(
        "list\tletters\nversion\t1\nsource\tInvented\ndefault_weighting\tw\n\
         condition\ttumour\tTumour\tInvented\n{codes}\
         weighting\tw\tW\tInvented\nweight\tw\ttumour\t1\n"
    );
    let loaded = parse(&text, Origin::File("letters.tsv".into())).expect("list loads");
    let mut c = Catalogue::builtin();
    c.insert(loaded.list);
    c
}

#[test]
fn a_letter_category_counts_when_a_list_names_it() {
    // Numeric range alone: C7A is not claimed.
    let c = user_list("code\tC77-C80\ttumour\tInvented\n");
    assert_eq!(flags_set(&engine_for(&c, "letters"), &["C7A.1"]), 0);
    assert_eq!(flags_set(&engine_for(&c, "letters"), &["C79.9"]), 1);
    // Named by an entry of its own.
    let c = user_list("code\tC77-C80\ttumour\tInvented\ncode\tC7A\ttumour\tInvented\n");
    assert_eq!(flags_set(&engine_for(&c, "letters"), &["C7A.1"]), 1);
    assert_eq!(flags_set(&engine_for(&c, "letters"), &["C7B.1"]), 0);
    // A range with a letter at an end claims the letters in that position.
    let c = user_list("code\tC7A-C7B\ttumour\tInvented\n");
    for code in ["C7A.1", "C7B.1"] {
        assert_eq!(flags_set(&engine_for(&c, "letters"), &[code]), 1, "{code}");
    }
    assert_eq!(flags_set(&engine_for(&c, "letters"), &["C78.0"]), 0);
    let c = user_list("code\tC45-C4A\ttumour\tInvented\n");
    for code in ["C45.0", "C49.9", "C4A.9"] {
        assert_eq!(flags_set(&engine_for(&c, "letters"), &[code]), 1, "{code}");
    }
}

#[test]
fn a_named_letter_category_is_no_overlap_with_a_numeric_range() {
    // Two conditions: C77-C80 and C7A. They share no code under the rule, so
    // the list loads without the "also claimed" warning.
    let text = "list\tletters\nversion\t1\nsource\tInvented\ndefault_weighting\tw\n\
                condition\ta\tA\tInvented\ncondition\tb\tB\tInvented\n\
                code\tC77-C80\ta\tInvented\ncode\tC7A\tb\tInvented\ncode\tC78.1\tb\tInvented\n\
                weighting\tw\tW\tInvented\nweight\tw\ta\t1\nweight\tw\tb\t1\n";
    let loaded = parse(text, Origin::File("letters.tsv".into())).unwrap();
    let claimed: Vec<&str> = loaded
        .warnings
        .iter()
        .filter(|d| d.message.contains("also claimed"))
        .map(|d| d.message.as_str())
        .collect();
    // C78.1 really is shared with C77-C80; C7A is not.
    assert_eq!(claimed.len(), 1, "{claimed:?}");
    assert!(claimed[0].contains("C78.1"), "{claimed:?}");
}

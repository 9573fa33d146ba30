//! The code-list parser over arbitrary text: never panics; a list it accepts
//! exports to canonical text that parses back to the same list (checksum and
//! content), and builds an engine that scores codes without panicking.
#![no_main]

use libfuzzer_sys::fuzz_target;
use morbus::lists::{canonical_text, parse, Catalogue, Origin};
use morbus::score::{Engine, IndexSpec, ScoreOptions};

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else {
        return;
    };
    let Ok(loaded) = parse(text, Origin::File("fuzz.tsv".into())) else {
        return;
    };
    let list = loaded.list;
    let canon = canonical_text(&list);
    let back = match parse(&canon, Origin::File("fuzz.tsv".into())) {
        Ok(l) => l.list,
        Err(e) => panic!("canonical text of an accepted list does not parse: {e}\n{canon}"),
    };
    assert_eq!(back.checksum, list.checksum, "{canon}");
    assert_eq!(canonical_text(&back), canon);

    // Score every code the list names (and a neighbour) with every weighting.
    let mut cat = Catalogue::builtin();
    let name = list.name.clone();
    let weightings: Vec<String> = list.weightings.iter().map(|w| w.name.clone()).collect();
    let firsts: Vec<_> = list.codes.iter().map(|c| c.first).collect();
    cat.insert(list);
    for w in weightings {
        let specs = [IndexSpec {
            list: name.clone(),
            weighting: Some(w),
        }];
        let options = ScoreOptions {
            flags: true,
            age: true,
            ..ScoreOptions::default()
        };
        let Ok(engine) = Engine::new(&cat, &specs, options) else {
            continue;
        };
        let mut unit = engine.unit();
        for c in &firsts {
            engine.add_code(&mut unit.bits, c);
        }
        engine.apply_hierarchy(&mut unit.bits, &mut unit.scratch);
        let mut values = Vec::new();
        for age in [None, Some(0), Some(150)] {
            engine.values(&unit.bits, age, &mut values);
            let mut out = Vec::new();
            engine.write_values(&values, b',', &mut out);
        }
    }
});

//! The ICD-10 code reader over arbitrary bytes: never panics, and what it
//! calls a code is ICD-10-shaped, reads back as itself, and does not depend
//! on ASCII case. List codes (`I50.x`) and range expansion ride along.
#![no_main]

use libfuzzer_sys::fuzz_target;
use morbus::code::{expand_range, read_code, read_list_code, Reading};

fuzz_target!(|data: &[u8]| {
    let r = read_code(data);
    if let Reading::Valid(c) = r {
        let b = c.as_bytes();
        assert!((3..=7).contains(&b.len()), "{c:?}");
        assert!(b[0].is_ascii_uppercase() && b[1].is_ascii_digit(), "{c:?}");
        assert!(
            b.iter()
                .all(|x| x.is_ascii_uppercase() || x.is_ascii_digit()),
            "{c:?}"
        );
        // Normalised text reads back as the same code.
        assert_eq!(read_code(c.as_str().as_bytes()), r);
        assert_eq!(c.prefix_key(c.len()), morbus::code::pack(b));
    }
    // ASCII case never matters.
    assert_eq!(read_code(&data.to_ascii_lowercase()), r, "{data:?}");
    assert_eq!(read_code(&data.to_ascii_uppercase()), r, "{data:?}");

    // As a list would write it, and as a range FIRST-LAST of two halves.
    if let Ok(text) = std::str::from_utf8(data) {
        let _ = read_list_code(text);
        if let Some((a, b)) = text.split_once('-') {
            if let (Some(first), Some(last)) = (read_list_code(a), read_list_code(b)) {
                if first.len() == last.len() && first <= last {
                    let mut prev = None;
                    expand_range(&first, &last, 500, |c| {
                        assert_eq!(c.len(), first.len());
                        assert!(c >= first && c <= last, "{c:?} outside {first:?}-{last:?}");
                        if let Some(p) = prev {
                            assert!(c > p, "not increasing: {p:?} then {c:?}");
                        }
                        prev = Some(c);
                    });
                }
            }
        }
    }
});

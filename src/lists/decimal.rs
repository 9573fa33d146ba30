//! Exact decimal weights: every weight is held as an integer number of
//! ten-thousandths, so that sums are exact and print without rounding noise.

/// Number of decimals a weight may have.
pub const SCALE_DECIMALS: u32 = 4;
/// Units per point.
pub const SCALE: i64 = 10_000;

/// Parses a decimal such as `-1`, `7.1` or `0.25` into scaled units, and
/// returns the number of decimals written.
///
/// ```
/// use morbus::lists::parse_scaled;
/// assert_eq!(parse_scaled("7.1"), Some((71_000, 1)));
/// assert_eq!(parse_scaled("-19"), Some((-190_000, 0)));
/// assert_eq!(parse_scaled("0.12345"), None);
/// ```
pub fn parse_scaled(text: &str) -> Option<(i64, u32)> {
    let t = text.trim();
    let (neg, digits) = match t.strip_prefix('-') {
        Some(rest) => (true, rest),
        None => (false, t.strip_prefix('+').unwrap_or(t)),
    };
    let (int, frac) = match digits.split_once('.') {
        Some((i, f)) => (i, f),
        None => (digits, ""),
    };
    if int.is_empty() && frac.is_empty() {
        return None;
    }
    if !int.bytes().all(|b| b.is_ascii_digit()) || !frac.bytes().all(|b| b.is_ascii_digit()) {
        return None;
    }
    if frac.len() > SCALE_DECIMALS as usize || int.len() > 12 {
        return None;
    }
    let mut v: i64 = 0;
    for b in int.bytes() {
        v = v * 10 + (b - b'0') as i64;
    }
    let mut f: i64 = 0;
    for b in frac.bytes() {
        f = f * 10 + (b - b'0') as i64;
    }
    f *= 10i64.pow(SCALE_DECIMALS - frac.len() as u32);
    let scaled = v * SCALE + f;
    Some((if neg { -scaled } else { scaled }, frac.len() as u32))
}

/// Appends a scaled value with `decimals` decimals (truncating finer digits,
/// which a weighting's own sums never have).
///
/// ```
/// let mut out = Vec::new();
/// morbus::lists::format_scaled(-5_000, 1, &mut out);
/// assert_eq!(out, b"-0.5");
/// ```
pub fn format_scaled(scaled: i64, decimals: u32, out: &mut Vec<u8>) {
    let neg = scaled < 0;
    let abs = scaled.unsigned_abs();
    let unit = SCALE as u64;
    let int = abs / unit;
    let frac = (abs % unit) / 10u64.pow(SCALE_DECIMALS - decimals.min(SCALE_DECIMALS));
    if neg && (int != 0 || frac != 0) {
        out.push(b'-');
    }
    push_u64(int, out);
    if decimals > 0 {
        out.push(b'.');
        let d = decimals.min(SCALE_DECIMALS) as usize;
        let mut buf = [b'0'; 4];
        let mut f = frac;
        for i in (0..d).rev() {
            buf[i] = b'0' + (f % 10) as u8;
            f /= 10;
        }
        out.extend_from_slice(&buf[..d]);
    }
}

/// Appends an unsigned integer in decimal.
#[inline]
pub fn push_u64(mut v: u64, out: &mut Vec<u8>) {
    let mut buf = [0u8; 20];
    let mut i = buf.len();
    loop {
        i -= 1;
        buf[i] = b'0' + (v % 10) as u8;
        v /= 10;
        if v == 0 {
            break;
        }
    }
    out.extend_from_slice(&buf[i..]);
}

#[cfg(test)]
mod tests {
    use super::*;

    fn fmt(v: i64, d: u32) -> String {
        let mut o = Vec::new();
        format_scaled(v, d, &mut o);
        String::from_utf8(o).unwrap()
    }

    #[test]
    fn round_trips() {
        for (text, d) in [
            ("0", 0),
            ("7.1", 1),
            ("-0.5", 1),
            ("12.25", 2),
            ("-19", 0),
            ("0.0001", 4),
        ] {
            let (v, dec) = parse_scaled(text).unwrap();
            assert_eq!(dec, d);
            assert_eq!(fmt(v, d), text);
        }
        assert_eq!(fmt(0, 1), "0.0");
        assert_eq!(fmt(150_000, 1), "15.0");
        assert_eq!(fmt(-1_000, 1), "-0.1");
    }

    #[test]
    fn rejects() {
        for bad in ["", "-", ".", "1.2.3", "1e3", "abc", "0.00001", " 1 2"] {
            assert_eq!(parse_scaled(bad), None, "{bad}");
        }
        assert_eq!(parse_scaled(".5"), Some((5_000, 1)));
    }
}

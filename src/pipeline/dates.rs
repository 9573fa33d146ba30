//! Episode dates: ISO `YYYY-MM-DD` by default (a time after it, as in
//! `2024-03-01T10:00` or `2024-03-01 10:00:00`, is ignored), or a pattern of
//! `%Y` (4-digit year), `%m` (month, 1 or 2 digits), `%d` (day, 1 or 2
//! digits), `%b` (English month abbreviation) and literal characters, such as
//! `%d/%m/%Y`. Dates become whole days since 1970-01-01.

use std::fmt;

/// How dates are written in the extract.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum DateFormat {
    Iso,
    Pattern(String),
}

impl fmt::Display for DateFormat {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            DateFormat::Iso => f.write_str("%Y-%m-%d"),
            DateFormat::Pattern(p) => f.write_str(p),
        }
    }
}

impl DateFormat {
    /// Parses a `--date-format` value; `None` if it is not a valid pattern
    /// (see [`DateFormat::from_pattern_checked`] for the reason).
    pub fn from_pattern(p: &str) -> Option<DateFormat> {
        DateFormat::from_pattern_checked(p).ok()
    }

    /// Parses a `--date-format` value, or says why it is refused: it lacks
    /// `%Y`, `%m`/`%b` or `%d`, names one of them twice (`%d/%m/%d`: which
    /// day would count?), or holds another `%` directive.
    ///
    /// ```
    /// use morbus::pipeline::DateFormat;
    /// assert!(DateFormat::from_pattern_checked("%d/%m/%Y").is_ok());
    /// assert_eq!(
    ///     DateFormat::from_pattern_checked("%d/%m/%d/%Y").unwrap_err(),
    ///     "names %d twice; give each of %Y, %m (or %b) and %d once"
    /// );
    /// ```
    pub fn from_pattern_checked(p: &str) -> Result<DateFormat, String> {
        if p == "%Y-%m-%d" || p.eq_ignore_ascii_case("iso") {
            return Ok(DateFormat::Iso);
        }
        let missing = || "must hold %Y, %m (or %b) and %d, e.g. '%d/%m/%Y'".to_string();
        let mut it = p.chars();
        let (mut y, mut m, mut d) = (None::<char>, None::<char>, None::<char>);
        while let Some(c) = it.next() {
            if c == '%' {
                let dir = it.next();
                let slot = match dir {
                    Some('Y') => &mut y,
                    Some('m') | Some('b') => &mut m,
                    Some('d') => &mut d,
                    Some(other) => {
                        return Err(format!(
                            "holds %{other}, which morbus does not read; it {}",
                            missing()
                        ))
                    }
                    None => return Err(format!("ends with a lone %; it {}", missing())),
                };
                let dir = dir.unwrap_or('%');
                if let Some(before) = slot.replace(dir) {
                    let what = if before == dir {
                        format!("names %{dir} twice")
                    } else {
                        format!("names the month twice (%{before} and %{dir})")
                    };
                    return Err(format!("{what}; give each of %Y, %m (or %b) and %d once"));
                }
            }
        }
        if y.is_some() && m.is_some() && d.is_some() {
            Ok(DateFormat::Pattern(p.to_string()))
        } else {
            Err(missing())
        }
    }

    /// Whether the pattern writes both the day and the month as numbers,
    /// so that a value such as `03/04/2024` reads either way round.
    pub fn day_month_numeric(&self) -> bool {
        match self {
            DateFormat::Iso => false,
            DateFormat::Pattern(p) => p.contains("%d") && p.contains("%m"),
        }
    }

    /// Reads a date as [`DateFormat::parse`] does, and says what the value
    /// tells about the day/month order of the pattern.
    ///
    /// ```
    /// use morbus::pipeline::dates::{DateFormat, DayMonth};
    /// let f = DateFormat::from_pattern("%d/%m/%Y").unwrap();
    /// assert_eq!(f.read(b"25/03/2024").unwrap().1, DayMonth::Proven);
    /// assert_eq!(f.read(b"03/04/2024").unwrap().1, DayMonth::Either);
    /// assert_eq!(f.read(b"04/04/2024").unwrap().1, DayMonth::Same);
    /// ```
    pub fn read(&self, text: &[u8]) -> Option<(i32, DayMonth)> {
        match self {
            DateFormat::Iso => self.parse(text).map(|d| (d, DayMonth::Same)),
            DateFormat::Pattern(p) => {
                let (y, m, d) = pattern_parts(p.as_bytes(), text)?;
                let day = days_from_civil(y as i32, m, d)?;
                Some((day, self.order(m, d)))
            }
        }
    }

    /// What a date's month `m` and day `d` tell about the pattern's
    /// day/month order.
    fn order(&self, m: u32, d: u32) -> DayMonth {
        if !self.day_month_numeric() || d == m {
            DayMonth::Same
        } else if d > 12 {
            DayMonth::Proven
        } else {
            DayMonth::Either
        }
    }

    /// Whether the pattern reads whole numbers ([`DateFormat::read_number`]):
    /// `%Y`, `%m` and `%d` alone, with nothing between them.
    pub fn reads_numbers(&self) -> bool {
        match self {
            DateFormat::Iso => false,
            DateFormat::Pattern(p) => {
                let p = p.as_bytes();
                p.len() == 6
                    && (0..3)
                        .all(|k| p[2 * k] == b'%' && matches!(p[2 * k + 1], b'Y' | b'm' | b'd'))
            }
        }
    }

    /// Reads a whole number (a typed column of numbers, such as a Parquet
    /// `INT32` holding 20240301) as a date: only a pattern made of `%Y`,
    /// `%m` and `%d` alone, with nothing between them (`%Y%m%d`,
    /// `%d%m%Y`, ...), reads numbers, by their digits: a four-digit year
    /// (1000 to 9999) and two-digit month and day, the leading zero that a
    /// number cannot hold restored (`%d%m%Y`: 1032024 is 01032024, 1 March
    /// 2024). The value's digits are taken apart by arithmetic, not written
    /// out as text. Any other pattern, ISO included, reads no number.
    ///
    /// ```
    /// use morbus::pipeline::dates::{DateFormat, DayMonth};
    /// let ymd = DateFormat::from_pattern("%Y%m%d").unwrap();
    /// assert_eq!(ymd.read_number(20240301), ymd.read(b"20240301"));
    /// let dmy = DateFormat::from_pattern("%d%m%Y").unwrap();
    /// assert_eq!(dmy.read_number(1032024), dmy.read(b"01032024"));
    /// assert_eq!(dmy.read_number(25032024).unwrap().1, DayMonth::Proven);
    /// assert_eq!(ymd.read_number(20241301), None);
    /// assert_eq!(ymd.read_number(9990301), None);
    /// assert_eq!(DateFormat::Iso.read_number(20240301), None);
    /// ```
    pub fn read_number(&self, n: i64) -> Option<(i32, DayMonth)> {
        let DateFormat::Pattern(p) = self else {
            return None;
        };
        if !self.reads_numbers() {
            return None;
        }
        let p = p.as_bytes();
        // Three directives of 4 + 2 + 2 digits: at most eight digits.
        let mut rest = u32::try_from(n).ok().filter(|&n| n < 100_000_000)?;
        let (mut y, mut m, mut d) = (None, None, None);
        for k in (0..3).rev() {
            let (size, slot) = match p[2 * k + 1] {
                b'Y' => (10_000, &mut y),
                b'm' => (100, &mut m),
                b'd' => (100, &mut d),
                _ => return None,
            };
            *slot = Some(rest % size);
            rest /= size;
        }
        let (y, m, d) = (y?, m?, d?);
        if y < 1000 {
            return None;
        }
        Some((days_from_civil(y as i32, m, d)?, self.order(m, d)))
    }

    /// Days since 1970-01-01, or `None` if the text is not a valid date.
    pub fn parse(&self, text: &[u8]) -> Option<i32> {
        match self {
            DateFormat::Iso => {
                if text.len() < 10 {
                    return None;
                }
                if text.len() > 10 && !matches!(text[10], b'T' | b' ') {
                    return None;
                }
                let t = &text[..10];
                if t[4] != b'-' || t[7] != b'-' {
                    return None;
                }
                let y = digits(&t[0..4])?;
                let m = digits(&t[5..7])?;
                let d = digits(&t[8..10])?;
                days_from_civil(y as i32, m, d)
            }
            DateFormat::Pattern(p) => parse_pattern(p.as_bytes(), text),
        }
    }
}

/// What a date value tells about the order of day and month in a pattern
/// that writes both as numbers.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum DayMonth {
    /// The other order would not be a date (the day is over 12): the value
    /// proves the pattern's order. Values of other patterns, and values
    /// whose day equals their month, say nothing.
    Proven,
    /// Swapping day and month would give another valid date.
    Either,
    /// Nothing to tell.
    Same,
}

fn digits(t: &[u8]) -> Option<u32> {
    if t.is_empty() || !t.iter().all(u8::is_ascii_digit) {
        return None;
    }
    Some(t.iter().fold(0u32, |a, &b| a * 10 + (b - b'0') as u32))
}

const MONTHS: [&[u8; 3]; 12] = [
    b"jan", b"feb", b"mar", b"apr", b"may", b"jun", b"jul", b"aug", b"sep", b"oct", b"nov", b"dec",
];

fn parse_pattern(p: &[u8], t: &[u8]) -> Option<i32> {
    let (y, m, d) = pattern_parts(p, t)?;
    days_from_civil(y as i32, m, d)
}

/// Whether the pattern has a numeric directive (`%Y`, `%m`, `%d`) at byte
/// `i`.
fn directive_at(p: &[u8], i: usize) -> bool {
    p.get(i) == Some(&b'%') && matches!(p.get(i + 1), Some(b'Y' | b'm' | b'd'))
}

/// Year, month and day of a value read with a pattern (not yet validated
/// as a date). `%m` and `%d` take one or two digits when a separator
/// stands on both sides of them; next to another numeric directive (`%Y%m%d`)
/// they take exactly two, so that `2024011` is not read as 2024-01-01.
fn pattern_parts(p: &[u8], t: &[u8]) -> Option<(u32, u32, u32)> {
    let (mut y, mut m, mut d) = (None, None, None);
    let (mut i, mut j) = (0, 0);
    while i < p.len() {
        if p[i] == b'%' && i + 1 < p.len() {
            let dir = p[i + 1];
            let packed = (i >= 2 && directive_at(p, i - 2)) || directive_at(p, i + 2);
            i += 2;
            match dir {
                b'Y' => {
                    y = Some(digits(t.get(j..j + 4)?)?);
                    j += 4;
                }
                b'm' | b'd' => {
                    let n = t[j..]
                        .iter()
                        .take(2)
                        .take_while(|c| c.is_ascii_digit())
                        .count();
                    if packed && n < 2 {
                        return None;
                    }
                    let v = digits(&t[j..j + n])?;
                    j += n;
                    if dir == b'm' {
                        m = Some(v)
                    } else {
                        d = Some(v)
                    }
                }
                b'b' => {
                    let w = t.get(j..j + 3)?.to_ascii_lowercase();
                    m = Some(MONTHS.iter().position(|mo| mo[..] == w[..])? as u32 + 1);
                    j += 3;
                }
                _ => return None,
            }
        } else {
            if t.get(j) != Some(&p[i]) {
                return None;
            }
            i += 1;
            j += 1;
        }
    }
    // Anything after the pattern must be a time part.
    if j < t.len() && !matches!(t[j], b'T' | b' ') {
        return None;
    }
    Some((y?, m?, d?))
}

fn is_leap(y: i32) -> bool {
    (y % 4 == 0 && y % 100 != 0) || y % 400 == 0
}

/// Appends the ISO `YYYY-MM-DD` form of a day number (days since
/// 1970-01-01; H. Hinnant's civil_from_days). Years outside 0..=9999 give
/// text that [`DateFormat::Iso`] does not read back.
///
/// ```
/// use morbus::pipeline::dates::{days_from_civil, write_iso_date};
/// let mut out = Vec::new();
/// write_iso_date(days_from_civil(2024, 2, 29).unwrap() as i64, &mut out);
/// assert_eq!(out, b"2024-02-29");
/// ```
pub fn write_iso_date(days: i64, out: &mut Vec<u8>) {
    let z = days.saturating_add(719_468);
    let era = z.div_euclid(146_097);
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let y = yoe.saturating_add(era.saturating_mul(400));
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = doy - (153 * mp + 2) / 5 + 1;
    let m = if mp < 10 { mp + 3 } else { mp - 9 };
    let y = if m <= 2 { y.saturating_add(1) } else { y };
    use std::io::Write as _;
    // Writing to a Vec cannot fail.
    let _ = write!(out, "{y:04}-{m:02}-{d:02}");
}

/// Days since 1970-01-01 of a proleptic Gregorian date, validated.
pub fn days_from_civil(y: i32, m: u32, d: u32) -> Option<i32> {
    if !(1..=12).contains(&m) || !(1000..=9999).contains(&y) {
        return None;
    }
    let dim = [
        31,
        if is_leap(y) { 29 } else { 28 },
        31,
        30,
        31,
        30,
        31,
        31,
        30,
        31,
        30,
        31,
    ];
    if d == 0 || d > dim[(m - 1) as usize] {
        return None;
    }
    // H. Hinnant's days_from_civil.
    let y = if m <= 2 { y - 1 } else { y };
    let era = if y >= 0 { y } else { y - 399 } / 400;
    let yoe = y - era * 400;
    let mp = (m as i32 + 9) % 12;
    let doy = (153 * mp + 2) / 5 + d as i32 - 1;
    let doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
    Some(era * 146_097 + doe - 719_468)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn iso_dates_read_back_to_their_day() {
        // Every day from 1000-01-01 to 9999-12-31 in steps of 37 days, and
        // the days around the leap-year rules (1900 no, 2000 yes).
        let first = days_from_civil(1000, 1, 1).unwrap();
        let last = days_from_civil(9999, 12, 31).unwrap();
        let around = [
            (1900, 2, 28),
            (1900, 3, 1),
            (2000, 2, 29),
            (2000, 3, 1),
            (1970, 1, 1),
        ];
        let days = (first..=last).step_by(37).chain([last]).chain(
            around
                .iter()
                .map(|&(y, m, d)| days_from_civil(y, m, d).unwrap()),
        );
        for day in days {
            let mut out = Vec::new();
            write_iso_date(day as i64, &mut out);
            assert_eq!(
                DateFormat::Iso.parse(&out),
                Some(day),
                "{}",
                String::from_utf8_lossy(&out)
            );
        }
        let mut out = Vec::new();
        write_iso_date(days_from_civil(1900, 3, 1).unwrap() as i64 - 1, &mut out);
        assert_eq!(out, b"1900-02-28");
    }

    #[test]
    fn iso_dates() {
        let f = DateFormat::Iso;
        assert_eq!(f.parse(b"1970-01-01"), Some(0));
        assert_eq!(f.parse(b"1970-01-02"), Some(1));
        assert_eq!(f.parse(b"2000-03-01"), Some(11_017));
        assert_eq!(
            f.parse(b"2024-02-29"),
            f.parse(b"2024-03-01").map(|d| d - 1)
        );
        assert_eq!(f.parse(b"2024-03-01T10:00:00"), f.parse(b"2024-03-01"));
        assert_eq!(f.parse(b"2023-02-29"), None);
        assert_eq!(f.parse(b"2023-13-01"), None);
        assert_eq!(f.parse(b"2023-1-01"), None);
        assert_eq!(f.parse(b"01/02/2023"), None);
        assert_eq!(f.parse(b"2023-01-01x"), None);
        // 2 years of 365 and 366 days
        assert_eq!(
            f.parse(b"2025-01-01").unwrap() - f.parse(b"2023-01-01").unwrap(),
            365 + 366
        );
    }

    #[test]
    fn patterns() {
        let f = DateFormat::from_pattern("%d/%m/%Y").unwrap();
        assert_eq!(f.parse(b"29/02/2024"), DateFormat::Iso.parse(b"2024-02-29"));
        assert_eq!(f.parse(b"1/2/2024"), DateFormat::Iso.parse(b"2024-02-01"));
        assert_eq!(f.parse(b"31/04/2024"), None);
        let f = DateFormat::from_pattern("%d-%b-%Y").unwrap();
        assert_eq!(
            f.parse(b"05-Mar-2021"),
            DateFormat::Iso.parse(b"2021-03-05")
        );
        assert!(DateFormat::from_pattern("%d/%m").is_none());
        assert!(DateFormat::from_pattern("%Y-%j").is_none());
    }

    #[test]
    fn a_directive_given_twice_is_refused() {
        for (p, why) in [
            ("%d/%m/%d/%Y", "names %d twice"),
            ("%Y%Y%m%d", "names %Y twice"),
            ("%d %b %m %Y", "names the month twice (%b and %m)"),
            ("%d-%m-%m-%Y", "names %m twice"),
        ] {
            let e = DateFormat::from_pattern_checked(p).unwrap_err();
            assert_eq!(
                e,
                format!("{why}; give each of %Y, %m (or %b) and %d once"),
                "{p}"
            );
        }
        assert!(DateFormat::from_pattern_checked("%d/%m/%Y %%").is_err());
    }

    #[test]
    fn packed_directives_take_two_digits() {
        let f = DateFormat::from_pattern("%Y%m%d").unwrap();
        assert_eq!(f.parse(b"20240115"), DateFormat::Iso.parse(b"2024-01-15"));
        // Seven digits: the day has one digit where two are needed.
        assert_eq!(f.parse(b"2024011"), None);
        assert_eq!(f.parse(b"202401"), None);
        assert_eq!(f.parse(b"2024115"), None);
        let f = DateFormat::from_pattern("%d%m%Y").unwrap();
        assert_eq!(f.parse(b"15012024"), DateFormat::Iso.parse(b"2024-01-15"));
        assert_eq!(f.parse(b"1512024"), None);
        // A separator on both sides still allows one digit.
        let f = DateFormat::from_pattern("%Y%m/%d").unwrap();
        assert_eq!(f.parse(b"202401/5"), DateFormat::Iso.parse(b"2024-01-05"));
        assert_eq!(f.parse(b"20241/05"), None);
    }

    #[test]
    fn day_month_evidence() {
        let f = DateFormat::from_pattern("%m/%d/%Y").unwrap();
        assert_eq!(f.read(b"12/25/2024").map(|r| r.1), Some(DayMonth::Proven));
        assert_eq!(f.read(b"02/03/2024").map(|r| r.1), Some(DayMonth::Either));
        assert_eq!(f.read(b"25/12/2024"), None);
        let f = DateFormat::from_pattern("%d-%b-%Y").unwrap();
        assert_eq!(f.read(b"03-Apr-2024").map(|r| r.1), Some(DayMonth::Same));
        assert_eq!(
            DateFormat::Iso.read(b"2024-03-04").map(|r| r.1),
            Some(DayMonth::Same)
        );
    }
}

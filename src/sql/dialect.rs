//! What differs between the SQL engines morbus writes for. Everything else
//! in the generated script is the SQL the three share.

use std::fmt;

/// A SQL engine the generated script runs on (each tested against the real
/// engine in `python/tests/test_sql.py`).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Dialect {
    DuckDb,
    Postgres,
    Sqlite,
}

impl fmt::Display for Dialect {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            Dialect::DuckDb => "DuckDB",
            Dialect::Postgres => "PostgreSQL",
            Dialect::Sqlite => "SQLite",
        })
    }
}

impl Dialect {
    /// The dialect of a `--dialect` value.
    pub fn from_name(name: &str) -> Option<Dialect> {
        match name.to_ascii_lowercase().as_str() {
            "duckdb" => Some(Dialect::DuckDb),
            "postgres" | "postgresql" => Some(Dialect::Postgres),
            "sqlite" => Some(Dialect::Sqlite),
            _ => None,
        }
    }

    /// A character by its code point.
    pub fn chr(&self, code: u32) -> String {
        match self {
            Dialect::Sqlite => format!("char({code})"),
            _ => format!("chr({code})"),
        }
    }

    /// The ASCII white space the engine trims (space, tab, line feed, form
    /// feed, carriage return), as a string expression.
    pub fn ascii_space(&self) -> String {
        format!(
            "' ' || {} || {} || {} || {}",
            self.chr(9),
            self.chr(10),
            self.chr(12),
            self.chr(13)
        )
    }

    /// `expr` without leading and trailing ASCII white space.
    pub fn trim_ascii(&self, expr: &str) -> String {
        match self {
            Dialect::Postgres => format!("btrim({expr}, {})", self.ascii_space()),
            _ => format!("trim({expr}, {})", self.ascii_space()),
        }
    }

    /// Number of bytes of a text value (UTF-8).
    pub fn byte_length(&self, expr: &str) -> String {
        match self {
            Dialect::DuckDb => format!("strlen({expr})"),
            Dialect::Postgres => format!("octet_length({expr})"),
            Dialect::Sqlite => format!("length(CAST({expr} AS BLOB))"),
        }
    }

    /// 1-based position of `needle` in `expr` (0 when absent).
    pub fn position(&self, expr: &str, needle: &str) -> String {
        match self {
            Dialect::Postgres => format!("strpos({expr}, {needle})"),
            _ => format!("instr({expr}, {needle})"),
        }
    }

    /// Whether `expr` consists only of characters of the bracket class
    /// `class` (e.g. `A-Za-z0-9`), the empty string included.
    pub fn only_chars(&self, expr: &str, class: &str) -> String {
        match self {
            Dialect::DuckDb => format!("regexp_full_match({expr}, '[{class}]*')"),
            Dialect::Postgres => format!("{expr} ~ '^[{class}]*$'"),
            Dialect::Sqlite => format!("{expr} NOT GLOB '*[^{class}]*'"),
        }
    }

    /// Whether `expr` starts with one character of each class in turn.
    pub fn starts_with_classes(&self, expr: &str, classes: &[&str]) -> String {
        let seq: String = classes.iter().map(|c| format!("[{c}]")).collect();
        match self {
            Dialect::DuckDb => format!("regexp_matches({expr}, '^{seq}')"),
            Dialect::Postgres => format!("{expr} ~ '^{seq}'"),
            Dialect::Sqlite => format!("{expr} GLOB '{seq}*'"),
        }
    }

    /// Whether `expr` is a whole number with an optional decimal part
    /// (`79`, `79.`, `79.5`): what the engine reads as an age.
    pub fn is_decimal_number(&self, expr: &str) -> String {
        match self {
            Dialect::DuckDb => format!("regexp_full_match({expr}, '[0-9]+([.][0-9]*)?')"),
            Dialect::Postgres => format!("{expr} ~ '^[0-9]+([.][0-9]*)?$'"),
            Dialect::Sqlite => format!(
                "({expr} GLOB '[0-9]*' AND {expr} NOT GLOB '*[^0-9.]*' AND {expr} NOT GLOB '*.*.*')"
            ),
        }
    }

    /// The day number (days since 1970-01-01) of `iso`, a text expression
    /// holding `YYYY-MM-DD` whose shape has been checked; NULL when it is
    /// not a calendar date (`2023-02-30`).
    pub fn day_number(&self, iso: &str) -> String {
        match self {
            Dialect::DuckDb => {
                format!("date_diff('day', DATE '1970-01-01', TRY_CAST({iso} AS DATE))")
            }
            // The first of the month plus the days, kept only when it
            // reads back as the same text (so 2023-02-30 is not a date).
            // Nested CASEs: PostgreSQL does not promise the order in which
            // the terms of an AND are evaluated, and a bad month must never
            // reach the cast.
            Dialect::Postgres => {
                let first = format!("CAST(substr({iso}, 1, 7) || '-01' AS DATE) + (CAST(substr({iso}, 9, 2) AS INTEGER) - 1)");
                format!(
                    "CASE WHEN substr({iso}, 6, 2) BETWEEN '01' AND '12' AND substr({iso}, 9, 2) BETWEEN '01' AND '31' \
AND substr({iso}, 1, 4) <> '0000' \
THEN CASE WHEN to_char({first}, 'YYYY-MM-DD') = {iso} THEN {first} - DATE '1970-01-01' END END"
                )
            }
            Dialect::Sqlite => format!(
                "CASE WHEN date(julianday({iso})) = {iso} THEN CAST(julianday({iso}) - 2440587.5 AS INTEGER) END"
            ),
        }
    }

    /// Whether `expr` starts with the characters of `shape` in turn: a
    /// digit, any one character, or a literal character.
    pub fn starts_with_shape(&self, expr: &str, shape: &[ShapeChar]) -> String {
        let mut pattern = String::new();
        for c in shape {
            match (self, c) {
                (_, ShapeChar::Digit) => pattern.push_str("[0-9]"),
                (Dialect::Sqlite, ShapeChar::Any) => pattern.push('?'),
                (_, ShapeChar::Any) => pattern.push('.'),
                (Dialect::Sqlite, ShapeChar::Literal(ch)) => match ch {
                    '*' | '?' | '[' => {
                        pattern.push('[');
                        pattern.push(*ch);
                        pattern.push(']');
                    }
                    _ => pattern.push(*ch),
                },
                (_, ShapeChar::Literal(ch)) => {
                    if ch.is_ascii_punctuation() {
                        pattern.push('\\');
                    }
                    pattern.push(*ch);
                }
            }
        }
        let pattern = pattern.replace('\'', "''");
        match self {
            Dialect::DuckDb => format!("regexp_matches({expr}, '^{pattern}')"),
            Dialect::Postgres => format!("{expr} ~ '^{pattern}'"),
            Dialect::Sqlite => format!("{expr} GLOB '{pattern}*'"),
        }
    }

    /// An expression that stops the query with `message` (a text
    /// expression), typed as a whole number so that it can stand in a CASE
    /// beside one: DuckDB's `error()`; in PostgreSQL the function the script
    /// creates ([`Dialect::stop_function`], named `function`); SQLite has no
    /// function that raises a message of one's own, so a JSON path made of
    /// the message is read (`JSON path error near '<message>'`).
    pub fn stop(&self, message: &str, function: &str) -> String {
        match self {
            Dialect::DuckDb => format!("CAST(error({message}) AS INTEGER)"),
            Dialect::Postgres => format!("{function}({message})"),
            Dialect::Sqlite => format!("CAST(json_extract('{{}}', {message}) AS INTEGER)"),
        }
    }

    /// The statement creating the function [`Dialect::stop`] calls
    /// (PostgreSQL only; `None` elsewhere).
    pub fn stop_function(&self, function: &str, replace: bool) -> Option<String> {
        match self {
            Dialect::Postgres => Some(format!(
                "CREATE {}FUNCTION {function}(message TEXT) RETURNS INTEGER LANGUAGE plpgsql AS $morbus$\n\
BEGIN\n    RAISE EXCEPTION '%', message;\nEND\n$morbus$;",
                if replace { "OR REPLACE " } else { "" }
            )),
            _ => None,
        }
    }

    /// A number as text with two decimals.
    pub fn two_decimals(&self, expr: &str) -> String {
        match self {
            Dialect::Postgres => {
                format!("CAST(round(CAST({expr} AS NUMERIC), 2) AS TEXT)")
            }
            _ => format!("printf('%.2f', {expr})"),
        }
    }

    /// A text of digits as a whole number (NULL where it cannot be read).
    pub fn to_bigint(&self, expr: &str) -> String {
        match self {
            Dialect::DuckDb => format!("TRY_CAST({expr} AS BIGINT)"),
            _ => format!("CAST({expr} AS BIGINT)"),
        }
    }

    /// The type of exact points (weights, age points, band bounds).
    pub fn points_type(&self) -> &'static str {
        match self {
            Dialect::Sqlite => "NUMERIC",
            _ => "DECIMAL(18, 4)",
        }
    }

    /// An exact sum of points as the engine writes it: a whole number for
    /// `decimals == 0`, else that many decimals.
    pub fn score_value(&self, expr: &str, decimals: u32) -> String {
        match (self, decimals) {
            (Dialect::Sqlite, 0) => format!("CAST(round({expr}) AS INTEGER)"),
            (Dialect::Sqlite, d) => format!("round({expr}, {d})"),
            (_, 0) => format!("CAST({expr} AS BIGINT)"),
            (_, d) => format!("CAST({expr} AS DECIMAL(18, {d}))"),
        }
    }

    /// A sum of points as compared with band bounds: exact where the engine
    /// has decimals, rounded to the points' precision in SQLite (whose
    /// numbers are binary floating point).
    pub fn exact_sum(&self, expr: &str) -> String {
        match self {
            Dialect::Sqlite => format!("round({expr}, 4)"),
            _ => expr.to_string(),
        }
    }

    /// The name of a temporary table for `DROP TABLE IF EXISTS`, qualified
    /// so that it can never name a permanent table.
    pub fn temp_qualified(&self, name: &str) -> String {
        match self {
            Dialect::Postgres => format!("pg_temp.{name}"),
            _ => format!("temp.{name}"),
        }
    }

    /// `value` split at the one-character separator `sep` into rows
    /// `(part_number, part)`, as a FROM item joined to the row holding
    /// `value` (`alias` names it). SQLite has no splitting function: its
    /// script splits in a recursive step instead (see the generator).
    pub fn split_lateral(&self, value: &str, sep: &str, alias: &str) -> String {
        match self {
            Dialect::Postgres => format!(
                "CROSS JOIN LATERAL unnest(string_to_array({value}, {sep})) WITH ORDINALITY AS {alias}(part, part_number)"
            ),
            _ => format!(
                "CROSS JOIN LATERAL (SELECT unnest(string_split({value}, {sep})) AS part, \
generate_subscripts(string_split({value}, {sep}), 1) AS part_number) AS {alias}"
            ),
        }
    }
}

/// One character of a shape ([`Dialect::starts_with_shape`]).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ShapeChar {
    /// An ASCII digit.
    Digit,
    /// Any one character.
    Any,
    /// This character.
    Literal(char),
}

/// A double-quoted identifier; a dotted name (`schema.table`) is quoted
/// part by part, and a part already in double quotes is kept.
pub fn quote_name(name: &str) -> String {
    let mut parts = Vec::new();
    let mut cur = String::new();
    let mut quoted = false;
    for ch in name.chars() {
        match ch {
            '"' => {
                quoted = !quoted;
                cur.push(ch);
            }
            '.' if !quoted => parts.push(std::mem::take(&mut cur)),
            _ => cur.push(ch),
        }
    }
    parts.push(cur);
    parts
        .iter()
        .map(|p| {
            if p.len() >= 2 && p.starts_with('"') && p.ends_with('"') {
                p.clone()
            } else {
                quote_ident(p)
            }
        })
        .collect::<Vec<_>>()
        .join(".")
}

/// One double-quoted identifier.
pub fn quote_ident(name: &str) -> String {
    format!("\"{}\"", name.replace('"', "\"\""))
}

/// A single-quoted string literal.
pub fn literal(text: &str) -> String {
    format!("'{}'", text.replace('\'', "''"))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_and_literals_are_quoted() {
        assert_eq!(quote_name("episodes"), "\"episodes\"");
        assert_eq!(
            quote_name("analytics.episodes"),
            "\"analytics\".\"episodes\""
        );
        assert_eq!(quote_name("\"odd.name\""), "\"odd.name\"");
        assert_eq!(quote_ident("a\"b"), "\"a\"\"b\"");
        assert_eq!(literal("it's"), "'it''s'");
    }
}

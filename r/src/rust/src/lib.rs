//! The Rust side of the R package `morbus` (`r/`): `.Call` entry points over
//! [`morbus::frame`]. A thin layer: it reads a data frame's columns in place
//! (character vectors through their `CHARSXP`s, factors through their
//! levels, integer, double, logical and `Date` vectors through their data
//! pointers), hands them to the library, and builds R vectors from the typed
//! results. There is no scoring logic here.
//!
//! The R API is declared by hand (the few functions and globals used, as in
//! `Rinternals.h`); the symbols are resolved when R loads the package, so
//! this crate builds without R (the workspace's `cargo build`, `clippy` and
//! `test` do not need R). Errors never cross the R API as a long jump: every
//! entry point returns either its result or an error value (a character
//! string with the attribute `morbus_exit`, the command line's exit code),
//! which the R code raises as a condition. Panics are caught and returned
//! the same way.

#![allow(non_upper_case_globals, non_snake_case, clippy::missing_safety_doc)]

use std::ffi::{c_char, c_int, c_uint, c_void};
use std::panic::{catch_unwind, AssertUnwindSafe};
use std::path::PathBuf;

use morbus::frame::{self, Columns, Field, Kind, Request, ScoreColumn};
use morbus::lists::Catalogue;
use morbus::pipeline::Header;
use morbus::provenance::Provenance;
use morbus::Error;

pub type SEXP = *mut c_void;

const LGLSXP: c_uint = 10;
const INTSXP: c_uint = 13;
const REALSXP: c_uint = 14;
const STRSXP: c_uint = 16;
const VECSXP: c_uint = 19;
const CE_UTF8: c_int = 1;

extern "C" {
    static R_NilValue: SEXP;
    static R_NaString: SEXP;
    static R_NamesSymbol: SEXP;
    static R_LevelsSymbol: SEXP;
    static R_NaInt: c_int;
    static R_NaReal: f64;
    fn Rf_allocVector(t: c_uint, n: isize) -> SEXP;
    fn Rf_protect(x: SEXP) -> SEXP;
    fn Rf_unprotect(n: c_int);
    fn Rf_xlength(x: SEXP) -> isize;
    fn TYPEOF(x: SEXP) -> c_int;
    fn LENGTH(x: SEXP) -> c_int;
    fn STRING_ELT(x: SEXP, i: isize) -> SEXP;
    fn STRING_PTR_RO(x: SEXP) -> *const SEXP;
    fn SET_STRING_ELT(x: SEXP, i: isize, v: SEXP);
    fn VECTOR_ELT(x: SEXP, i: isize) -> SEXP;
    fn SET_VECTOR_ELT(x: SEXP, i: isize, v: SEXP) -> SEXP;
    fn R_CHAR(x: SEXP) -> *const c_char;
    fn INTEGER(x: SEXP) -> *mut c_int;
    fn REAL(x: SEXP) -> *mut f64;
    fn LOGICAL(x: SEXP) -> *mut c_int;
    fn Rf_getAttrib(x: SEXP, name: SEXP) -> SEXP;
    fn Rf_setAttrib(x: SEXP, name: SEXP, v: SEXP) -> SEXP;
    fn Rf_install(name: *const c_char) -> SEXP;
    fn Rf_inherits(x: SEXP, name: *const c_char) -> c_int;
    fn Rf_mkCharLenCE(s: *const c_char, len: c_int, enc: c_int) -> SEXP;
    fn Rf_ScalarInteger(x: c_int) -> SEXP;
}

/// Protects `n` values for as long as it lives.
struct Protected(c_int);

impl Protected {
    unsafe fn one(&mut self, x: SEXP) -> SEXP {
        self.0 += 1;
        Rf_protect(x)
    }
}

impl Drop for Protected {
    fn drop(&mut self) {
        if self.0 > 0 {
            unsafe { Rf_unprotect(self.0) }
        }
    }
}

unsafe fn mkchar(s: &str) -> SEXP {
    Rf_mkCharLenCE(s.as_ptr().cast(), s.len() as c_int, CE_UTF8)
}

/// A character vector of `items` (`None`: `NA`).
unsafe fn strings<S: AsRef<str>>(items: impl ExactSizeIterator<Item = Option<S>>) -> SEXP {
    let v = Rf_protect(Rf_allocVector(STRSXP, items.len() as isize));
    for (i, s) in items.enumerate() {
        let c = match s {
            Some(s) => mkchar(s.as_ref()),
            None => R_NaString,
        };
        SET_STRING_ELT(v, i as isize, c);
    }
    Rf_unprotect(1);
    v
}

unsafe fn string(s: &str) -> SEXP {
    strings(std::iter::once(Some(s)))
}

/// A named list of `items`.
unsafe fn named_list(items: Vec<(String, SEXP)>) -> SEXP {
    // The items are unprotected: allocate nothing before they are stored.
    let mut p = Protected(0);
    let names: Vec<String> = items.iter().map(|(n, _)| n.clone()).collect();
    let list = p.one(Rf_allocVector(VECSXP, items.len() as isize));
    for (i, (_, v)) in items.into_iter().enumerate() {
        SET_VECTOR_ELT(list, i as isize, v);
    }
    Rf_setAttrib(list, R_NamesSymbol, strings(names.iter().map(Some)));
    list
}

/// The error value of an entry point.
unsafe fn failure(message: &str, exit: i32) -> SEXP {
    let mut p = Protected(0);
    let s = p.one(string(message));
    Rf_setAttrib(
        s,
        Rf_install(c"morbus_exit".as_ptr()),
        Rf_ScalarInteger(exit),
    );
    s
}

unsafe fn error(e: Error) -> SEXP {
    failure(&e.to_string(), e.exit_code())
}

/// Runs an entry point, turning a panic into an error value.
fn guarded(f: impl FnOnce() -> SEXP) -> SEXP {
    match catch_unwind(AssertUnwindSafe(f)) {
        Ok(s) => s,
        Err(p) => {
            let what = p
                .downcast_ref::<&str>()
                .map(|s| s.to_string())
                .or_else(|| p.downcast_ref::<String>().cloned())
                .unwrap_or_else(|| "a panic".into());
            unsafe { failure(&format!("internal error: {what}"), 1) }
        }
    }
}

/// The text of a `CHARSXP`, read in place (its bytes as R holds them).
#[inline]
unsafe fn chars<'a>(c: SEXP) -> &'a [u8] {
    std::slice::from_raw_parts(R_CHAR(c).cast::<u8>(), LENGTH(c) as usize)
}

unsafe fn opt_string(x: SEXP) -> Option<String> {
    if TYPEOF(x) as c_uint != STRSXP || Rf_xlength(x) < 1 {
        return None;
    }
    let c = STRING_ELT(x, 0);
    (c != R_NaString).then(|| String::from_utf8_lossy(chars(c)).into_owned())
}

unsafe fn string_vec(x: SEXP) -> Vec<String> {
    if TYPEOF(x) as c_uint != STRSXP {
        return Vec::new();
    }
    (0..Rf_xlength(x))
        .map(|i| STRING_ELT(x, i))
        .filter(|&c| c != R_NaString)
        .map(|c| String::from_utf8_lossy(chars(c)).into_owned())
        .collect()
}

unsafe fn flag(x: SEXP) -> bool {
    TYPEOF(x) as c_uint == LGLSXP && Rf_xlength(x) >= 1 && *LOGICAL(x) == 1
}

/// The element `name` of a named list (`R_NilValue` when absent).
unsafe fn element(list: SEXP, name: &str) -> SEXP {
    let names = Rf_getAttrib(list, R_NamesSymbol);
    for i in 0..Rf_xlength(list) {
        if chars(STRING_ELT(names, i)) == name.as_bytes() {
            return VECTOR_ELT(list, i);
        }
    }
    R_NilValue
}

/// A column of an R data frame, read in place.
enum Col {
    Text(*const SEXP),
    Factor {
        codes: *const c_int,
        levels: Vec<Option<(*const u8, usize)>>,
    },
    Integer(*const c_int),
    Number(*const f64),
    Logical(*const c_int),
    /// `Date` stored as doubles or integers.
    DateReal(*const f64),
    DateInt(*const c_int),
    Other(String),
}

struct Frame {
    rows: usize,
    cols: Vec<Col>,
    na_string: SEXP,
}

// SAFETY: the frame's vectors are protected by R for the duration of the
// `.Call` (they are its arguments) and are only read; the R API is called
// off the main thread only for `R_CHAR` and `LENGTH` of `CHARSXP`s, which
// read a cell's header and data and allocate nothing.
unsafe impl Sync for Frame {}

fn type_name(t: c_int) -> &'static str {
    match t as c_uint {
        0 => "NULL",
        LGLSXP => "logical",
        INTSXP => "integer",
        REALSXP => "double",
        15 => "complex",
        STRSXP => "character",
        VECSXP => "list",
        24 => "raw",
        _ => "other",
    }
}

impl Frame {
    /// Views of every column of a list of columns (materialising alternative
    /// representations on this, R's, thread).
    unsafe fn new(data: SEXP) -> Frame {
        let n = Rf_xlength(data);
        let mut rows = 0;
        let mut cols = Vec::with_capacity(n as usize);
        for i in 0..n {
            let x = VECTOR_ELT(data, i);
            rows = Rf_xlength(x) as usize;
            let t = TYPEOF(x) as c_uint;
            let date = Rf_inherits(x, c"Date".as_ptr()) != 0;
            let col = match t {
                STRSXP => Col::Text(STRING_PTR_RO(x)),
                INTSXP if Rf_inherits(x, c"factor".as_ptr()) != 0 => {
                    let lv = Rf_getAttrib(x, R_LevelsSymbol);
                    let levels = (0..Rf_xlength(lv))
                        .map(|k| {
                            let c = STRING_ELT(lv, k);
                            (c != R_NaString).then(|| {
                                let s = chars(c);
                                (s.as_ptr(), s.len())
                            })
                        })
                        .collect();
                    Col::Factor {
                        codes: INTEGER(x),
                        levels,
                    }
                }
                INTSXP if date => Col::DateInt(INTEGER(x)),
                REALSXP if date => Col::DateReal(REAL(x)),
                INTSXP => Col::Integer(INTEGER(x)),
                REALSXP => Col::Number(REAL(x)),
                LGLSXP => Col::Logical(LOGICAL(x)),
                other => Col::Other(type_name(other as c_int).to_string()),
            };
            cols.push(col);
        }
        Frame {
            rows,
            cols,
            na_string: R_NaString,
        }
    }
}

impl Columns for Frame {
    fn rows(&self) -> usize {
        self.rows
    }

    fn kind(&self, col: usize) -> Kind {
        match self.cols[col] {
            Col::Text(_) | Col::Factor { .. } => Kind::Text,
            Col::Integer(_) => Kind::Integer,
            Col::Number(_) => Kind::Number,
            Col::Logical(_) => Kind::Logical,
            Col::DateReal(_) | Col::DateInt(_) => Kind::Date,
            Col::Other(_) => Kind::Other,
        }
    }

    fn type_name(&self, col: usize) -> String {
        match &self.cols[col] {
            Col::Text(_) => "character".into(),
            Col::Factor { .. } => "factor".into(),
            Col::Integer(_) => "integer".into(),
            Col::Number(_) => "double".into(),
            Col::Logical(_) => "logical".into(),
            Col::DateReal(_) | Col::DateInt(_) => "Date".into(),
            Col::Other(t) => t.clone(),
        }
    }

    #[inline]
    fn field(&self, col: usize, row: usize) -> Field<'_> {
        // SAFETY: `row < self.rows`, the length of every column of the
        // frame (checked by the R code), and see `Sync` above.
        unsafe {
            match &self.cols[col] {
                Col::Text(p) => {
                    let c = *p.add(row);
                    if c == self.na_string {
                        Field::Null
                    } else {
                        Field::Text(chars(c))
                    }
                }
                Col::Factor { codes, levels } => {
                    let k = *codes.add(row);
                    if k == R_NaInt || k < 1 {
                        return Field::Null;
                    }
                    match levels.get(k as usize - 1).copied().flatten() {
                        Some((p, n)) => Field::Text(std::slice::from_raw_parts(p, n)),
                        None => Field::Null,
                    }
                }
                Col::Integer(p) => match *p.add(row) {
                    v if v == R_NaInt => Field::Null,
                    v => Field::Integer(v as i64),
                },
                Col::Number(p) => match *p.add(row) {
                    v if v.is_nan() => Field::Null,
                    v => Field::Number(v),
                },
                Col::Logical(p) => match *p.add(row) {
                    v if v == R_NaInt => Field::Null,
                    v => Field::Logical(v != 0),
                },
                Col::DateReal(p) => match *p.add(row) {
                    v if !v.is_finite() => Field::Null,
                    v => Field::Date(v.floor() as i64),
                },
                Col::DateInt(p) => match *p.add(row) {
                    v if v == R_NaInt => Field::Null,
                    v => Field::Date(v as i64),
                },
                Col::Other(_) => Field::Null,
            }
        }
    }
}

/// The request of a call from its options list (see `R/score.R`).
unsafe fn request(opts: SEXP) -> Request {
    let s = |n: &str| opt_string(element(opts, n));
    let threads = element(opts, "threads");
    Request {
        dx: string_vec(element(opts, "dx")),
        dx_sep: s("dx_sep"),
        layout: s("layout").unwrap_or_default(),
        id: s("id"),
        episode: s("episode"),
        date: s("date"),
        date_format: s("date_format"),
        lookback: s("lookback"),
        window: s("window"),
        exclude_primary: flag(element(opts, "exclude_primary")),
        primary: s("primary"),
        poa: s("poa"),
        poa_values: string_vec(element(opts, "poa_values")),
        max_unreadable_dates: s("max_unreadable_dates"),
        index: string_vec(element(opts, "index")),
        age: s("age"),
        flags: flag(element(opts, "flags")),
        no_hierarchy: !flag(element(opts, "hierarchy")),
        strict: flag(element(opts, "strict")),
        threads: if TYPEOF(threads) as c_uint == INTSXP && Rf_xlength(threads) >= 1 {
            (*INTEGER(threads)).max(0) as usize
        } else {
            0
        },
        edition: s("edition"),
        keep: string_vec(element(opts, "keep")),
        label: s("label"),
    }
}

/// The built-in lists, plus those of a directory.
fn catalogue(dir: Option<String>) -> Result<(Catalogue, Vec<String>), Error> {
    match dir {
        None => Ok((Catalogue::builtin(), Vec::new())),
        Some(d) => Catalogue::builtin_and_dir(&PathBuf::from(d)),
    }
}

unsafe fn int_vec(values: impl ExactSizeIterator<Item = Option<i64>>) -> SEXP {
    let v = Rf_allocVector(INTSXP, values.len() as isize);
    let p = INTEGER(v);
    for (i, x) in values.enumerate() {
        *p.add(i) = x.map_or(R_NaInt, |x| x as c_int);
    }
    v
}

unsafe fn real_vec(values: impl ExactSizeIterator<Item = Option<f64>>) -> SEXP {
    let v = Rf_allocVector(REALSXP, values.len() as isize);
    let p = REAL(v);
    for (i, x) in values.enumerate() {
        *p.add(i) = x.unwrap_or(R_NaReal);
    }
    v
}

/// An R vector of a score column: integer scores and flags as integers,
/// decimal scores as doubles, bands as character.
unsafe fn score_vector(c: &ScoreColumn) -> SEXP {
    match c {
        ScoreColumn::Int(v) => int_vec(v.iter().copied()),
        ScoreColumn::Float(v) => real_vec(v.iter().copied()),
        ScoreColumn::Flag(v) => int_vec(v.iter().map(|x| x.map(i64::from))),
        ScoreColumn::Band { names, values } => {
            let mut p = Protected(0);
            let cells = p.one(strings(names.iter().map(Some)));
            let out = p.one(Rf_allocVector(STRSXP, values.len() as isize));
            for (i, b) in values.iter().enumerate() {
                let c = match b {
                    Some(b) => STRING_ELT(cells, *b as isize),
                    None => R_NaString,
                };
                SET_STRING_ELT(out, i as isize, c);
            }
            out
        }
    }
}

/// An R value of a JSON value: objects as named lists, arrays of scalars of
/// one type as vectors, other arrays as lists, numbers as doubles (whole
/// numbers that fit as integers), `null` as `NULL`.
unsafe fn json_value(v: &serde_json::Value) -> SEXP {
    use serde_json::Value as J;
    match v {
        J::Null => R_NilValue,
        J::Bool(b) => {
            let x = Rf_allocVector(LGLSXP, 1);
            *LOGICAL(x) = *b as c_int;
            x
        }
        J::Number(n) => match n
            .as_i64()
            .filter(|i| i32::try_from(*i).is_ok() && *i != i32::MIN as i64)
        {
            Some(i) => Rf_ScalarInteger(i as c_int),
            None => real_vec(std::iter::once(n.as_f64())),
        },
        J::String(s) => string(s),
        J::Array(items) => {
            if !items.is_empty() && items.iter().all(|i| i.is_string()) {
                return strings(items.iter().map(|i| i.as_str()));
            }
            let mut p = Protected(0);
            let list = p.one(Rf_allocVector(VECSXP, items.len() as isize));
            for (k, i) in items.iter().enumerate() {
                SET_VECTOR_ELT(list, k as isize, json_value(i));
            }
            list
        }
        J::Object(map) => {
            let mut p = Protected(0);
            let list = p.one(Rf_allocVector(VECSXP, map.len() as isize));
            for (k, (_, i)) in map.iter().enumerate() {
                SET_VECTOR_ELT(list, k as isize, json_value(i));
            }
            Rf_setAttrib(list, R_NamesSymbol, strings(map.keys().map(Some)));
            list
        }
    }
}

/// `.Call("morbus_r_score", columns, names, options, lists_dir)`: scores a
/// data frame. Returns `list(columns, first_rows, kept_rows, provenance,
/// report)`: the score columns (a named list), the 1-based frame row of
/// each output row's unit (long layout, else `NULL`), per `keep` column the
/// 1-based row whose value each unit carries (`NA`: none), the provenance
/// as a list and the summary line.
#[no_mangle]
pub unsafe extern "C" fn morbus_r_score(data: SEXP, names: SEXP, opts: SEXP, dir: SEXP) -> SEXP {
    guarded(|| {
        let run = || -> Result<_, Error> {
            let (cat, _notes) = catalogue(opt_string(dir))?;
            let (engine, cfg) = request(opts).resolve(&cat)?;
            let header = Header {
                names: string_vec(names),
            };
            let frame = Frame::new(data);
            let scored = frame::score(&engine, &cfg, &header, &frame, 1)?;
            let prov = Provenance::new(&engine, &cfg, &scored.summary).to_json();
            Ok((engine, scored, prov))
        };
        let (engine, scored, prov) = match run() {
            Ok(r) => r,
            Err(e) => return error(e),
        };
        let mut p = Protected(0);
        let cols = p.one(Rf_allocVector(VECSXP, scored.columns.len() as isize));
        for (i, c) in scored.columns.iter().enumerate() {
            SET_VECTOR_ELT(cols, i as isize, score_vector(c));
        }
        let col_names: Vec<&str> = engine.columns().iter().map(|c| c.name.as_str()).collect();
        Rf_setAttrib(
            cols,
            R_NamesSymbol,
            strings(col_names.into_iter().map(Some)),
        );
        let first = match &scored.first_rows {
            Some(rows) => p.one(int_vec(rows.iter().map(|&r| Some(r as i64 + 1)))),
            None => R_NilValue,
        };
        // Per kept column, the 1-based row whose value each unit carries.
        let kept = p.one(Rf_allocVector(VECSXP, scored.kept_rows.len() as isize));
        for (j, rows) in scored.kept_rows.iter().enumerate() {
            SET_VECTOR_ELT(
                kept,
                j as isize,
                int_vec(rows.iter().map(|r| r.map(|r| r as i64 + 1))),
            );
        }
        let prov_json: serde_json::Value =
            serde_json::from_str(&prov).unwrap_or(serde_json::Value::Null);
        let prov = p.one(json_value(&prov_json));
        let report = p.one(string(&scored.summary.report()));
        named_list(vec![
            ("columns".into(), cols),
            ("first_rows".into(), first),
            ("kept_rows".into(), kept),
            ("provenance".into(), prov),
            ("report".into(), report),
        ])
    })
}

/// `.Call("morbus_r_explain", columns, names, options, lists_dir)`:
/// `list(columns, label_rows, report)`, the columns of `morbus explain`
/// after the id, episode and label columns (`source_date` as days since
/// 1970-01-01) and, with `label`, the 1-based row of each record's label
/// value (`NA`: none).
#[no_mangle]
pub unsafe extern "C" fn morbus_r_explain(data: SEXP, names: SEXP, opts: SEXP, dir: SEXP) -> SEXP {
    guarded(|| {
        let run = || -> Result<_, Error> {
            let (cat, _notes) = catalogue(opt_string(dir))?;
            let (engine, cfg) = request(opts).resolve(&cat)?;
            let header = Header {
                names: string_vec(names),
            };
            let frame = Frame::new(data);
            frame::explain(&engine, &cfg, &header, &frame, 1)
        };
        let (ex, summary) = match run() {
            Ok(r) => r,
            Err(e) => return error(e),
        };
        let mut p = Protected(0);
        // Each column is protected as soon as it is made: making the next
        // one may run R's garbage collector.
        let number = |v: &[Option<f64>]| {
            if ex.whole_weights {
                int_vec(v.iter().map(|w| w.map(|w| w as i64)))
            } else {
                real_vec(v.iter().copied())
            }
        };
        let weights: Vec<Option<f64>> = ex.weight.iter().map(|&w| Some(w)).collect();
        let items: Vec<(String, SEXP)> = vec![
            ("row", p.one(int_vec(ex.row.iter().map(|&r| Some(r))))),
            ("index", p.one(strings(ex.index.iter().map(Some)))),
            ("source_row", p.one(int_vec(ex.source_row.iter().copied()))),
            (
                "source_date",
                p.one(real_vec(ex.source_date.iter().map(|d| d.map(|d| d as f64)))),
            ),
            (
                "code_as_written",
                p.one(strings(ex.code_as_written.iter().map(|s| s.as_deref()))),
            ),
            ("code", p.one(strings(ex.code.iter().map(|s| s.as_deref())))),
            (
                "condition",
                p.one(strings(ex.condition.iter().map(|s| s.as_deref()))),
            ),
            ("weight", p.one(number(&weights))),
            ("status", p.one(strings(ex.status.iter().map(Some)))),
            ("age_points", p.one(number(&ex.age_points))),
        ]
        .into_iter()
        .map(|(n, v)| (n.to_string(), v))
        .collect();
        let cols = p.one(named_list(items));
        let labels = if ex.label_rows.is_empty() {
            R_NilValue
        } else {
            p.one(int_vec(
                ex.label_rows.iter().map(|r| r.map(|r| r as i64 + 1)),
            ))
        };
        let report = p.one(string(&summary.report()));
        named_list(vec![
            ("columns".into(), cols),
            ("label_rows".into(), labels),
            ("report".into(), report),
        ])
    })
}

/// `.Call("morbus_r_lists", lists_dir)`: `list(table, notes)`, one row per
/// list (name, version, title, conditions, code_entries, weightings,
/// default_weighting, age_points, checksum, origin, source) and the notes of
/// loading the directory.
#[no_mangle]
pub unsafe extern "C" fn morbus_r_lists(dir: SEXP) -> SEXP {
    guarded(|| {
        let (cat, notes) = match catalogue(opt_string(dir)) {
            Ok(c) => c,
            Err(e) => return error(e),
        };
        let lists = cat.lists();
        let mut p = Protected(0);
        let text = |f: &dyn Fn(&morbus::lists::CodeList) -> String| {
            let v: Vec<String> = lists.iter().map(f).collect();
            v
        };
        let mut items: Vec<(String, SEXP)> = Vec::new();
        let mut add = |name: &str, v: SEXP, p: &mut Protected| items.push((name.into(), p.one(v)));
        add(
            "name",
            strings(text(&|l| l.name.clone()).iter().map(Some)),
            &mut p,
        );
        add(
            "version",
            strings(text(&|l| l.version.clone()).iter().map(Some)),
            &mut p,
        );
        add(
            "title",
            strings(text(&|l| l.title.clone()).iter().map(Some)),
            &mut p,
        );
        add(
            "conditions",
            int_vec(lists.iter().map(|l| Some(l.conditions.len() as i64))),
            &mut p,
        );
        add(
            "code_entries",
            int_vec(lists.iter().map(|l| Some(l.code_entries() as i64))),
            &mut p,
        );
        let weightings = text(&|l| {
            l.weightings
                .iter()
                .map(|w| w.name.as_str())
                .collect::<Vec<_>>()
                .join(", ")
        });
        add("weightings", strings(weightings.iter().map(Some)), &mut p);
        add(
            "default_weighting",
            strings(text(&|l| l.default_weighting.clone()).iter().map(Some)),
            &mut p,
        );
        let age = Rf_allocVector(LGLSXP, lists.len() as isize);
        for (i, l) in lists.iter().enumerate() {
            *LOGICAL(age).add(i) = c_int::from(!l.age_points.is_empty());
        }
        add("age_points", age, &mut p);
        add(
            "checksum",
            strings(text(&|l| l.checksum.clone()).iter().map(Some)),
            &mut p,
        );
        add(
            "origin",
            strings(text(&|l| l.origin.to_string()).iter().map(Some)),
            &mut p,
        );
        add(
            "source",
            strings(text(&|l| l.source.clone()).iter().map(Some)),
            &mut p,
        );
        let table = p.one(named_list(items));
        let notes = p.one(strings(notes.iter().map(Some)));
        named_list(vec![("table".into(), table), ("notes".into(), notes)])
    })
}

/// `.Call("morbus_r_version")`: the version of the library.
#[no_mangle]
pub unsafe extern "C" fn morbus_r_version() -> SEXP {
    guarded(|| string(morbus::VERSION))
}

/// Whether this build is a debug build (slow; for tests only).
#[no_mangle]
pub unsafe extern "C" fn morbus_r_debug_build() -> SEXP {
    guarded(|| {
        let x = Rf_allocVector(LGLSXP, 1);
        *LOGICAL(x) = c_int::from(cfg!(debug_assertions));
        x
    })
}

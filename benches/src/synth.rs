//! `synth`: seeded synthetic hospital episode extracts for exercising morbus.
//!
//! The scenario is wholly invented: the Quillmere Vale Hospitals group, its five
//! sites and every patient and diagnosis in the output. The generator is
//! deterministic in its seed: the same options give the same bytes whatever the
//! number of threads, and `--layout long` describes exactly the episodes and
//! codes that `--layout wide` writes for the same seed.
//!
//! How an extract is made:
//!
//! 1. Every patient gets a profile from its own random stream: an age at the
//!    middle of the window (hence a birth date and an age that grows with the
//!    admission date), a sex, a home site, latent morbidity and frailty scores,
//!    and a latent set of conditions, each with an onset day (before the window
//!    or during it). Acute events (myocardial infarction, stroke, hip fracture)
//!    have an onset day that becomes an admission.
//! 2. The episodes are shared out over the patients by a skewed utilisation
//!    weight, every patient getting at least one. Each patient's admission dates
//!    are drawn (with clustered readmissions), then a 30-day death is drawn for
//!    each admission in turn from a logistic model of age and the latent
//!    conditions; a death ends the patient's admissions (the unused episodes move
//!    on to the next patient, so the total stays exact).
//! 3. The episodes are sorted by admission date (a few arrive late, as in real
//!    feeds) and numbered. Each episode's codes come from its own random stream:
//!    a primary diagnosis (an event, an exacerbation of a condition, or an acute
//!    problem typical of the age), codes for the active conditions (each coded
//!    with some probability, so lookback matters), acute secondary codes and
//!    frailty-related codes, written in the coding style of the site.

use std::fs::File;
use std::io::{self, BufWriter, Write};
use std::process::ExitCode;
use std::time::Instant;

const HELP: &str = "\
synth - seeded synthetic hospital episode extracts for morbus

The data describe Quillmere Vale Hospitals, an invented group of five sites.
Nothing in the output refers to real patients, places or organisations.

USAGE:
    synth [OPTIONS]

OPTIONS:
    --episodes N        episodes to write (default 10000)
    --patients P        distinct patients, 1..=N (default: 3/8 of N)
    --fields F          diagnosis fields per episode, 1-250 (default 20); the
                        long layout has at most F codes per episode too
    --layout L          wide (one row per episode) or long (one row per code)
                        (default wide)
    --seed S            seed, an unsigned 64-bit integer (default 1)
    --start DATE        first day of the admission window, YYYY-MM-DD
                        (default 2022-01-01)
    --days D            length of the admission window in days, 1-7305
                        (default 1095)
    --wards-per-site K  wide layout: add a last column `ward` naming one of K
                        invented wards of the episode's site (SITE-1..SITE-K),
                        from a hash of the seed and episode number, so every
                        other column is the same as without it (default: no
                        ward column)
    --shuffle           shuffle the rows (episode ids keep their numbering, which
                        follows the admission date)
    --threads T         worker threads (default: available cores); the output
                        does not depend on it
    -o, --output PATH   write to PATH instead of standard output
    -q, --quiet         no summary line on standard error
    --list-conditions   print the latent condition model (TSV) and exit
    -h, --help          print this help

COLUMNS:
    wide: episode_id,patient_id,site,admission_date,age,sex,dx1..dxF,
          died_within_30_days[,ward]
    long: episode_id,patient_id,admission_date,age,position,code,
          present_on_admission,died_within_30_days

    position 1 is the primary diagnosis; an episode without any code has one
    long row with an empty code. Ages are whole years at admission (about 1%
    are missing or unreadable). Codes mix styles on purpose: dotted and
    undotted, some lower case, X filler, dagger/asterisk marks, ICD-10-CM-style
    codes from one site, and about 0.5% invalid entries.

EXAMPLE:
    synth --episodes 1000000 --patients 375000 --seed 7 -o /tmp/episodes.csv
";

// ---------------------------------------------------------------------------
// Random numbers: SplitMix64 for seeding, xoshiro256** for the streams.
// ---------------------------------------------------------------------------

const GOLDEN: u64 = 0x9E37_79B9_7F4A_7C15;

fn mix64(mut z: u64) -> u64 {
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

/// Independent random streams, one per purpose and per patient or episode.
const STREAM_PROFILE: u64 = 1;
const STREAM_TIMELINE: u64 = 2;
const STREAM_EPISODE: u64 = 3;
const STREAM_SHUFFLE: u64 = 4;

struct Rng {
    s: [u64; 4],
}

impl Rng {
    fn from_seed(seed: u64) -> Rng {
        let mut x = seed;
        let mut next = || {
            x = x.wrapping_add(GOLDEN);
            mix64(x)
        };
        Rng {
            s: [next(), next(), next(), next()],
        }
    }

    fn stream(seed: u64, kind: u64, a: u64, b: u64) -> Rng {
        let h = mix64(
            seed ^ mix64(kind.wrapping_mul(GOLDEN) ^ mix64(a ^ mix64(b.wrapping_add(GOLDEN)))),
        );
        Rng::from_seed(h)
    }

    fn next_u64(&mut self) -> u64 {
        let result = self.s[1].wrapping_mul(5).rotate_left(7).wrapping_mul(9);
        let t = self.s[1] << 17;
        self.s[2] ^= self.s[0];
        self.s[3] ^= self.s[1];
        self.s[1] ^= self.s[2];
        self.s[0] ^= self.s[3];
        self.s[2] ^= t;
        self.s[3] = self.s[3].rotate_left(45);
        result
    }

    /// Uniform in [0, 1).
    fn unit(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 * (1.0 / (1u64 << 53) as f64)
    }

    fn chance(&mut self, p: f64) -> bool {
        self.unit() < p
    }

    /// Uniform in 0..n (n > 0).
    fn below(&mut self, n: u64) -> u64 {
        ((self.next_u64() as u128 * n as u128) >> 64) as u64
    }

    fn normal(&mut self) -> f64 {
        let u1 = 1.0 - self.unit();
        let u2 = self.unit();
        (-2.0 * u1.ln()).sqrt() * (std::f64::consts::TAU * u2).cos()
    }

    fn poisson(&mut self, lambda: f64) -> u32 {
        let limit = (-lambda).exp();
        let mut k = 0;
        let mut p = self.unit();
        while p > limit && k < 60 {
            k += 1;
            p *= self.unit();
        }
        k
    }
}

fn sigmoid(x: f64) -> f64 {
    1.0 / (1.0 + (-x).exp())
}

// ---------------------------------------------------------------------------
// Dates.
// ---------------------------------------------------------------------------

fn days_from_civil(y: i64, m: u32, d: u32) -> i64 {
    let y = if m <= 2 { y - 1 } else { y };
    let era = if y >= 0 { y } else { y - 399 } / 400;
    let yoe = y - era * 400;
    let mp = (m as i64 + 9) % 12;
    let doy = (153 * mp + 2) / 5 + d as i64 - 1;
    let doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
    era * 146_097 + doe - 719_468
}

fn civil_from_days(z: i64) -> (i32, u32, u32) {
    let z = z + 719_468;
    let era = if z >= 0 { z } else { z - 146_096 } / 146_097;
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let y = yoe + era * 400;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = (doy - (153 * mp + 2) / 5 + 1) as u32;
    let m = if mp < 10 { mp + 3 } else { mp - 9 } as u32;
    ((if m <= 2 { y + 1 } else { y }) as i32, m, d)
}

fn parse_date(s: &str) -> Option<i64> {
    let b = s.as_bytes();
    if b.len() != 10 || b[4] != b'-' || b[7] != b'-' {
        return None;
    }
    let y: i64 = s[0..4].parse().ok()?;
    let m: u32 = s[5..7].parse().ok()?;
    let d: u32 = s[8..10].parse().ok()?;
    if !(1..=12).contains(&m) || !(1..=31).contains(&d) {
        return None;
    }
    let z = days_from_civil(y, m, d);
    (civil_from_days(z) == (y as i32, m, d)).then_some(z)
}

fn age_at(birth: (i32, u32, u32), day: (i32, u32, u32)) -> u32 {
    let before_birthday = (day.1, day.2) < (birth.1, birth.2);
    (day.0 - birth.0 - i32::from(before_birthday)).max(0) as u32
}

// ---------------------------------------------------------------------------
// The invented hospital group.
// ---------------------------------------------------------------------------

struct Site {
    code: &'static str,
    /// Share of patients whose home site this is.
    weight: f64,
    /// Probability that a code is written with its dot.
    dotted: f64,
    /// Probability that a code is written in lower case.
    lower: f64,
    /// Probability that a dagger/asterisk mark is kept.
    marks: f64,
    /// Probability that a three-character category gets an `X` filler.
    filler: f64,
    /// Probability that an episode is coded from the ICD-10-CM-style tables.
    cm: f64,
    /// Coding depth (multiplies the number of secondary codes).
    depth: f64,
    /// Whether the site records present-on-admission flags.
    poa: bool,
}

/// Quillmere Vale Hospitals (invented).
const SITES: [Site; 5] = [
    // Quillmere General Hospital: dotted codes, keeps dagger/asterisk marks.
    Site {
        code: "QGH",
        weight: 0.34,
        dotted: 0.97,
        lower: 0.004,
        marks: 0.8,
        filler: 0.0,
        cm: 0.0,
        depth: 1.0,
        poa: true,
    },
    // Vantorby Infirmary: undotted codes with X filler on categories.
    Site {
        code: "VTI",
        weight: 0.26,
        dotted: 0.03,
        lower: 0.004,
        marks: 0.0,
        filler: 0.9,
        cm: 0.0,
        depth: 1.1,
        poa: true,
    },
    // Hessenwick Community Hospital: hand-keyed, mixed styles and case.
    Site {
        code: "HCH",
        weight: 0.15,
        dotted: 0.6,
        lower: 0.25,
        marks: 0.3,
        filler: 0.1,
        cm: 0.0,
        depth: 0.9,
        poa: true,
    },
    // Orrindale Memorial Hospital: a clinical system that codes in ICD-10-CM style.
    Site {
        code: "OMH",
        weight: 0.17,
        dotted: 0.95,
        lower: 0.01,
        marks: 0.0,
        filler: 0.0,
        cm: 0.85,
        depth: 1.15,
        poa: true,
    },
    // Saltbeck Cottage Hospital: shallow coding, undotted, no POA flags.
    Site {
        code: "SCH",
        weight: 0.08,
        dotted: 0.1,
        lower: 0.004,
        marks: 0.0,
        filler: 0.5,
        cm: 0.0,
        depth: 0.75,
        poa: false,
    },
];

// ---------------------------------------------------------------------------
// Code catalogue. Weights are relative within a table. A trailing `†` or `*`
// marks a dagger or asterisk code; sites that do not keep marks drop them.
// ---------------------------------------------------------------------------

/// `CODE WEIGHT` entries separated by commas.
type Codes = &'static str;
/// One `CODE W18-44 W45-69 W70+` entry per line: weights for three age bands.
type BandedCodes = &'static str;

/// The entries of a code table: each code with its weights.
fn entries(table: &'static str) -> impl Iterator<Item = (&'static str, [f64; 3])> {
    table
        .split([',', '\n'])
        .map(str::trim)
        .filter(|e| !e.is_empty())
        .map(|e| {
            let mut f = e.split_whitespace();
            let code = f.next().unwrap_or_default();
            let mut w = [0.0; 3];
            for (slot, v) in w.iter_mut().zip(f) {
                *slot = v.parse().expect("a numeric weight in a code table");
            }
            (code, w)
        })
}

const OBESITY_WHO: Codes = "E66.9 60, E66.0 25, E66.8 10, E66.2 5";
const OBESITY_CM: Codes = "E66.9 40, E66.01 35, Z68.41 15, Z68.35 10";
const HTN_WHO: Codes = "I10 80, I11.9 6, I12.9 6, I13.9 1, I15.9 2";
const HTN_CM: Codes = "I10 85, I11.9 5, I12.9 8, I13.10 2";
const LIPIDS_WHO: Codes = "E78.0 50, E78.5 35, E78.2 15";
const LIPIDS_CM: Codes = "E78.5 60, E78.00 25, E78.2 15";
const T2DM_WHO: Codes = "\
    E11.9 40, E11.8 5, E11.7 4, E11.6 3, E11.5 4, E11.4† 5, E11.3† 4, E11.2† 5, E11.0 1, \
    E11.1 1, E14.9 4";
const T2DM_CM: Codes = "\
    E11.9 35, E11.65 15, E11.22 12, E11.40 5, E11.42 6, E11.319 3, E11.51 3, E11.8 2, \
    E11.649 2";
const T1DM_WHO: Codes = "E10.9 50, E10.1 8, E10.2† 6, E10.3† 6, E10.4† 5, E10.6 4, E10.7 3";
const T1DM_CM: Codes = "E10.9 45, E10.10 10, E10.22 8, E10.65 15, E10.649 4";
const CKD_WHO: Codes = "N18.1 2, N18.2 4, N18.3 30, N18.4 12, N18.5 6, N18.9 20, N18 2, N19 6";
const CKD_CM: Codes = "\
    N18.30 12, N18.31 8, N18.32 6, N18.3 6, N18.4 12, N18.5 5, N18.6 4, N18.9 15, N19 4";
const IHD_WHO: Codes = "I25.1 35, I25.9 20, I20.9 12, I20.8 4, I25.8 5, Z95.1 6, Z95.5 8";
const IHD_CM: Codes = "I25.10 40, I25.119 5, I20.9 10, I25.9 5, Z95.1 6, Z95.5 10";
const AF_WHO: Codes = "I48 15, I48.0 12, I48.1 8, I48.2 6, I48.9 20, I49.9 4, I47.1 2";
const AF_CM: Codes = "I48.91 30, I48.0 12, I48.20 8, I48.11 4, I48.19 4, I49.9 3";
const HF_WHO: Codes = "I50.0 25, I50.1 6, I50.9 30, I11.0 8, I13.0 2, I42.0 4, I42.9 3";
const HF_CM: Codes = "\
    I50.9 20, I50.22 8, I50.32 10, I50.42 4, I50.23 5, I50.33 4, I11.0 8, I42.9 3";
const MI_WHO: Codes = "I21.0 10, I21.1 8, I21.2 3, I21.4 35, I21.9 15, I22.9 3";
const MI_CM: Codes = "I21.4 40, I21.09 8, I21.19 7, I21.3 5, I21.A1 4";
const MI_HIST: Codes = "I25.2 1";
const VALVE_WHO: Codes = "I35.0 40, I34.0 25, I35.9 8, I34.9 5, I05.9 4, Z95.2 8";
const VALVE_CM: Codes = "I35.0 40, I34.0 25, I35.1 10, I34.1 5, Z95.2 8";
const STROKE_WHO: Codes = "I63.9 35, I63.5 10, I63.4 8, I61.9 10, I64 12, I60.9 2";
const STROKE_CM: Codes = "I63.9 30, I63.512 6, I63.511 6, I63.40 5, I61.9 8";
const STROKE_HIST_WHO: Codes = "I69.3 35, I69.4 15, I69.8 5, Z86.7 15";
const STROKE_HIST_CM: Codes = "I69.351 10, I69.354 5, I69.30 10, Z86.73 30";
const PVD_WHO: Codes = "I73.9 40, I70.2 25, I71.4 8, I77.1 3, I73.8 4, I70.9 4";
const PVD_CM: Codes = "I73.9 40, I70.213 10, I70.209 10, I70.0 5, I73.89 4";
const COPD_WHO: Codes = "J44.9 45, J44.1 15, J44.0 8, J43.9 6, J42 4, J47 4";
const COPD_CM: Codes = "J44.9 45, J44.1 18, J44.0 8, J43.9 6, J47.9 3";
const ASTHMA_WHO: Codes = "J45.9 60, J45.0 20, J45.8 8, J46 3";
const ASTHMA_CM: Codes = "J45.909 50, J45.901 12, J45.20 10, J45.50 8, J45.40 8";
const PARKINSON_WHO: Codes = "G20 1";
const PARKINSON_CM: Codes = "G20 60, G20.A1 30, G20.A2 10";
const DEMENTIA_WHO: Codes = "F03 40, F01.9 12, F01.1 3, G30.9† 15, G30.1† 6, F00.9* 4, F02.8* 2";
const DEMENTIA_CM: Codes = "F03.90 40, F03.91 6, F01.50 12, G30.9 15, G30.1 5, F03.A0 4";
const EPILEPSY_WHO: Codes = "G40.9 50, G40.3 15, G40.2 10, G40.1 8, G41.9 3";
const EPILEPSY_CM: Codes = "G40.909 50, G40.309 15, G40.209 10, G40.919 5";
const PARALYSIS_WHO: Codes = "G81.9 35, G81.0 10, G81.1 8, G82.2 8, G82.4 5, G83.9 4";
const PARALYSIS_CM: Codes = "G81.91 20, G81.94 15, G81.90 10, G82.20 8, G82.50 4";
const CANCER_WHO: Codes = "\
    C18.7 6, C18.9 6, C20 5, C34.1 6, C34.9 8, C50.9 10, C50.4 4, C61 10, C25.9 4, \
    C16.9 3, C67.9 4, C64 3, C43.5 2, C56 2, C53.9 1, C15.9 3, C22.0 2, C71.9 1, C73 1";
const CANCER_CM: Codes = "\
    C18.9 8, C18.7 5, C20 5, C34.90 8, C34.11 6, C50.911 10, C50.412 4, C61 10, C25.9 4, \
    C16.9 3, C67.9 4, C64.9 3, C43.59 2, C56.9 2, C15.9 3, C22.0 2";
const METS_WHO: Codes = "C78.7 25, C78.0 15, C79.5 20, C79.3 8, C77.9 10, C78.6 6, C79.9 3";
const METS_CM: Codes = "C78.7 25, C78.00 12, C79.51 20, C79.31 8, C77.9 10, C78.6 6, C79.9 3";
const HAEM_WHO: Codes = "C83.3 12, C85.9 15, C90.0 20, C91.1 18, C92.0 10, C81.9 6, C82.9 4";
const HAEM_CM: Codes = "C83.30 12, C85.90 15, C90.00 20, C91.10 18, C92.00 10, C81.90 6";
const ALCOHOL_WHO: Codes = "F10.2 45, F10.1 30, F10.3 6, F10.4 2, F10.0 10, Z72.1 8";
const ALCOHOL_CM: Codes = "F10.20 40, F10.10 30, F10.239 5, F10.129 8, F10.21 6";
const DRUGS_WHO: Codes = "F11.2 25, F19.2 15, F12.1 20, F14.1 15, F12.2 8, F15.1 4";
const DRUGS_CM: Codes = "F11.20 25, F19.20 12, F12.10 20, F14.10 15, F11.21 8";
const LIVER_MILD_WHO: Codes = "\
    K70.3 20, K74.6 20, K76.0 25, K70.0 8, K73.9 3, B18.2 8, K70.1 4, K75.8 2";
const LIVER_MILD_CM: Codes = "\
    K70.30 15, K74.60 15, K76.0 25, K75.81 10, K70.10 5, B18.2 8, K74.69 6";
const LIVER_SEVERE_WHO: Codes = "\
    K72.9 15, K70.4 15, K76.6 20, I85.0 10, I85.9 15, K76.7 8, K72.1 5";
const LIVER_SEVERE_CM: Codes = "\
    K72.90 15, K70.40 12, K76.6 20, I85.00 10, I85.10 8, K76.7 8, K70.31 6";
const DEPRESSION_WHO: Codes = "F32.9 50, F32.1 12, F33.1 10, F33.9 8, F34.1 6, F32.0 6, F41.2 8";
const DEPRESSION_CM: Codes = "F32.9 40, F32.A 15, F33.1 10, F32.1 10, F33.9 8, F34.1 5";
const PSYCHOSIS_WHO: Codes = "F20.9 40, F20.0 15, F25.9 10, F31.9 20, F29 10, F22.0 5";
const PSYCHOSIS_CM: Codes = "F20.9 40, F25.9 10, F31.9 20, F29 10, F31.81 5";
const HYPOTHYROID_WHO: Codes = "E03.9 80, E03.8 10, E89.0 10";
const HYPOTHYROID_CM: Codes = "E03.9 85, E89.0 15";
const RHEUM_WHO: Codes = "M06.9 35, M05.9 15, M32.9 8, M35.3 15, M45 8, M06.0 10, M05.8 4";
const RHEUM_CM: Codes = "M06.9 40, M05.79 10, M32.9 8, M35.3 15, M45.9 6, M06.09 6";
const ULCER_WHO: Codes = "K25.9 20, K26.9 20, K27.9 15, K25.7 10, K26.7 8, K25.4 6";
const ULCER_CM: Codes = "K25.9 20, K26.9 20, K27.9 15, K25.7 10, K26.4 5";
const HIV_WHO: Codes = "B20 20, B24 30, B20.7 10, B23.8 10, Z21 30";
const HIV_CM: Codes = "B20 70, Z21 30";
const ANAEMIA_WHO: Codes = "D64.9 45, D50.9 25, D50.0 10, D51.0 6, D53.9 4, D62 8";
const ANAEMIA_CM: Codes = "D64.9 45, D50.9 25, D50.0 10, D63.1 10, D62 8, D51.0 4";
const COAG_WHO: Codes = "D68.9 30, D69.6 35, D68.3 10, D68.4 6, D69.5 8";
const COAG_CM: Codes = "D68.9 30, D69.6 35, D68.51 6, D68.32 10, D69.59 8";
const MALNUTRITION_WHO: Codes = "E43 15, E44.0 15, E44.1 8, E46 20, R63.4 30, R64 12";
const MALNUTRITION_CM: Codes = "E43 12, E44.0 15, E44.1 8, E46 15, R63.4 35, R64 10";
const PULMONARY_CIRCULATION_WHO: Codes = "I26.9 40, I27.0 8, I27.2 20, I27.9 10, I26.0 8";
const PULMONARY_CIRCULATION_CM: Codes = "I26.99 35, I26.09 8, I27.20 15, I27.21 8, I27.0 5";
const GORD_WHO: Codes = "K21.9 70, K21.0 30";
const GORD_CM: Codes = "K21.9 70, K21.00 30";
const OSTEOPOROSIS_WHO: Codes = "M81.9 40, M81.0 40, M80.9 10, M80.0 10";
const OSTEOPOROSIS_CM: Codes = "M81.0 70, M81.8 15, M80.08XA 15";
const SENSORY_WHO: Codes = "H54.7 20, H54.4 10, H54.2 5, H91.9 35, H90.5 20, H91.1 10";
const SENSORY_CM: Codes = "H54.7 20, H91.90 35, H90.5 20, H91.10 10, H54.40 8";
const HIPFRACTURE_WHO: Codes = "S72.0 40, S72.00 15, S72.1 25, S72.10 8, S72.2 8";
const HIPFRACTURE_CM: Codes = "\
    S72.001A 20, S72.002A 15, S72.011A 8, S72.141A 12, S72.142A 10, S72.21XA 6, \
    S72.091A 5";
const HIPFRACTURE_HIST_WHO: Codes = "Z96.6 50, Z47.8 20, Z87.8 15";
const HIPFRACTURE_HIST_CM: Codes = "Z96.641 40, Z87.81 30, S72.001D 15, S72.141D 10";

/// Primary diagnoses of admissions not explained by a latent condition.
const ACUTE_WHO: BandedCodes = "
J18.9         3    8   20
J18.0         1    2    5
J22           2    4    8
J20.9         2    3    4
J06.9         3    1    1
J69.0         0    1    4
J96.0         0    1    2
U07.1         2    3    4
J90           0    1    2
J93.1         1  0.5  0.3
N39.0         3    4   12
N30.0         2    1    1
N10           2    1    1
N20.0         3    3    1
R33           0    1    3
N17.9         0    2    6
A41.9         1    3    8
A41.5         0    1    3
A09.9         3    2    3
A04.7         0    1    2
A08.4         2    1    1
R07.4         6    8    5
R07.3         2    2    1
R55           2    3    6
I80.2         1    2    2
I95.1         0    1    3
R10.4         8    5    3
R10.3         3    2    1
K35.8         6    2  0.5
K80.2         3    4    2
K80.0         1    2    1
K81.0         1    2    1
K85.9         1    2    1
K56.6         0    1    2
K57.3         0    2    3
K92.2         0    1    3
K92.1         0    1    1
K59.0         0    1    3
K52.9         2    1    2
K40.9         1    2    2
K29.7         1    1    1
K63.5         0    1    1
D12.6         0    3    2
R56.8         2    1    1
G43.9         3    1    0
R51           3    2    1
G45.9         0    2    3
F05.9         0  0.5    4
R41.0         0  0.5    2
F10.0         3    2  0.5
T39.1         3    1  0.2
S72.3         0  0.5    1
S52.5         3    3    3
S82.6         2    2    1
S82.8         1    1  0.5
S42.2         1    1    2
S32.0         0    1    2
S22.3         1    1    2
S06.0         2    1    2
S00.9         1  0.5    2
S01.0         1  0.5    1
S09.9         1  0.5    1
S61.0         2    1  0.5
M17.1         0    4    4
M16.1         0    3    4
M54.5         3    3    1
M51.1         2    2  0.5
M75.1         1    2    1
M23.2         2    1    0
M20.1         1    1  0.5
G56.0         1    2    1
H25.9         0    2    8
H26.9         0    1    2
H40.1         0    1    2
H33.0         0    1    1
L03.1         2    2    3
L02.4         2    1  0.5
L97           0    1    2
L89.9         0  0.5    2
O80.0         8    0    0
O80.9         2    0    0
O70.0         2    0    0
O34.2         3    0    0
O82.0         2    0    0
O48           2    0    0
O21.0         2    0    0
O03.9         2    0    0
O00.1         1    0    0
N92.0         2    1    0
N81.1         0    1    1
N83.2         1    1    0
D25.9         1    2    0
N40           0    1    2
N43.3       0.5  0.5  0.5
R31           0    1    2
J35.0         2    0    0
J34.2         1    1  0.5
J32.9         1    1  0.5
H66.9         1    0    0
E16.2       0.5  0.5    1
E87.1         0    1    3
E86           1    1    3
E87.6         0  0.5    1
R50.9         2    2    2
R53           0    1    2
R69           0  0.3  0.5
Z03.9         1    1  0.5
R42           1    1    2
R06.0         1    2    3
R11           1    1    1
T78.4         1  0.5  0.3
T81.4       0.5    1    1
T84.5         0  0.5    1
T83.5         0  0.5    1
Z50.9         0  0.3    2
Z51.5         0  0.2    1
";
const ACUTE_CM: BandedCodes = "
J18.9         3    8   20
J22           2    4    8
J20.9         2    3    4
J06.9         3    1    1
J69.0         0    1    4
J96.01        0    1    2
U07.1         2    3    4
J90           0    1    2
J93.11        1  0.5  0.3
N39.0         3    4   12
N30.00        2    1    1
N10           2    1    1
N20.0         3    3    1
R33.9         0    1    3
N17.9         0    2    6
A41.9         1    3    8
A41.51        0    1    3
A09           3    2    3
A04.72        0    1    2
A08.4         2    1    1
R07.89        6    8    5
R07.9         2    2    1
R55           2    3    6
I82.409       1    2    2
I95.1         0    1    3
R10.9         8    5    3
R10.84        3    2    1
K35.80        6    2  0.5
K80.20        3    4    2
K81.0         1    2    1
K85.90        1    2    1
K56.609       0    1    2
K57.32        0    2    3
K92.2         0    1    3
K59.00        0    1    3
K52.9         2    1    2
K40.90        1    2    2
K29.70        1    1    1
D12.6         0    3    2
R56.9         2    1    1
G43.909       3    1    0
R51.9         3    2    1
G45.9         0    2    3
F05           0  0.5    4
R41.0         0  0.5    2
F10.129       3    2  0.5
T39.1X2A      3    1  0.2
S72.301A      0  0.5    1
S52.501A      3    3    3
S82.891A      2    2    1
S42.201A      1    1    2
S32.010A      0    1    2
S22.39XA      1    1    2
S06.0X0A      2    1    2
S00.93XA      1  0.5    2
S01.01XA      1  0.5    1
M17.11        0    4    4
M16.11        0    3    4
M54.50        3    3    1
M51.16        2    2  0.5
M75.101       1    2    1
G56.00        1    2    1
H25.9         0    2    8
H26.9         0    1    2
H40.10X0      0    1    2
L03.115       2    2    3
L97.909       0    1    2
L89.159       0  0.5    2
O80          10    0    0
O70.0         2    0    0
O34.211       3    0    0
O48.0         2    0    0
O21.0         2    0    0
O03.9         2    0    0
N92.0         2    1    0
N81.10        0    1    1
D25.9         1    2    0
N40.0         0    1    2
R31.9         0    1    2
J35.01        2    0    0
J34.2         1    1  0.5
J32.9         1    1  0.5
E16.2       0.5  0.5    1
E87.1         0    1    3
E86.0         1    1    3
E87.6         0  0.5    1
R50.9         2    2    2
R53.83        0    1    2
R69           0  0.3  0.5
Z03.89        1    1  0.5
R42           1    1    2
R06.02        1    2    3
R11.0         1    1    1
T78.40XA      1  0.5  0.3
T81.40XA    0.5    1    1
T84.50XA      0  0.5    1
T83.511A      0  0.5    1
Z51.5         0  0.2    1
";

/// Secondary codes that are not modelled as latent conditions.
const SECONDARY_WHO: BandedCodes = "
Z88.0         3    3    3
Z92.1         0    1    3
Z95.1         0  0.5    1
Z95.5         0  0.7    1
Z96.6         0    1    3
Z86.7         0  0.5    1
Z85.3         0  0.5    1
Z85.4         0  0.3  0.8
Z80.0         0  0.5  0.5
Z72.0         4    3    1
F17.1         2    2    1
Z91.1         1    1    1
Z93.1         0  0.2  0.4
Z90.4         0  0.3  0.4
M19.9         0    2    4
M54.5         2    2    1
M79.6         1    1    1
M25.5         1    1    1
G47.3       0.5    2    1
F41.9         3    2    1
F41.1         1    1  0.5
I83.9       0.3    1    1
K57.3         0    1    2
K44.9         0    1    1
N40           0  0.8    3
B96.2         1    1    2
E55.9       0.5    1    2
E53.8         0  0.5    1
R00.1         0  0.5    1
R00.0         1    1    1
I95.9         0  0.5  1.5
R13           0  0.5  1.5
R31           0  0.5    1
R50.9         1    1    1
R11           1    1    1
R06.0       0.5    1    2
R07.4         1    1  0.5
R10.4         1  0.5  0.3
J22         0.5    1  1.5
J90           0  0.5    1
J96.9         0  0.3    1
N17.9         0    1  2.5
E87.1         0  0.8    2
E87.6       0.3  0.8  1.5
E86         0.5  0.8    2
K59.0       0.5    1    2
K52.9         1  0.5  0.5
K92.2         0  0.3  0.8
L03.1       0.5  0.5    1
L97           0  0.3    1
C44.3         0  0.3    1
D17.1       0.3  0.5  0.3
H25.9         0  0.5    2
H40.1         0  0.3    1
G56.0       0.5    1  0.5
G43.9         2    1  0.2
J34.2       0.5  0.5  0.2
K64.9       0.5  0.5  0.3
K80.2       0.5    1    1
N20.0       0.5  0.5  0.3
E05.9       0.3  0.5  0.5
E16.2       0.3  0.3  0.5
E83.5         0  0.3  0.5
R79.8         0  0.3  0.5
Y95           0  0.2  0.6
Y84.6         0  0.2  0.5
T83.5         0  0.2  0.6
Z22.3         0  0.2  0.6
U07.1       0.5  0.5  0.8
Z33         1.5    0    0
O24.4         1    0    0
N92.0       0.5  0.3    0
N95.1         0  0.8  0.2
R69         0.1  0.1  0.2
R53         0.3  0.5    1
R42         0.5  0.8    1
R51           1  0.5  0.3
R45.0       0.5  0.3  0.2
";
const SECONDARY_CM: BandedCodes = "
Z88.0         3    3    3
Z79.01        0    1    3
Z79.4         0  0.8    1
Z79.84        0  0.5  0.8
Z79.899       1    2    2
Z87.891       1    2    2
Z95.1         0  0.5    1
Z95.5         0  0.7    1
Z96.651       0  0.5  1.5
Z85.3         0  0.5    1
Z72.0         3    2  0.5
F17.210       2    2    1
Z91.19        1    1    1
M19.90        0    2    4
M54.50        2    2    1
M25.561       1    1    1
G47.33      0.5    2    1
F41.9         3    2    1
F41.1         1    1  0.5
I83.90      0.3    1    1
K57.30        0    1    2
K44.9         0    1    1
N40.0         0  0.8    3
B96.20        1    1    2
E55.9       0.5    1    2
R00.1         0  0.5    1
I95.9         0  0.5  1.5
R13.10        0  0.5  1.5
R31.9         0  0.5    1
R50.9         1    1    1
R11.2         1    1    1
R06.02      0.5    1    2
N17.9         0    1  2.5
E87.1         0  0.8    2
E87.6       0.3  0.8  1.5
E86.0       0.5  0.8    2
K59.00      0.5    1    2
K92.2         0  0.3  0.8
L03.115     0.5  0.5    1
C44.311       0  0.3    1
H25.9         0  0.5    2
G56.00      0.5    1  0.5
G43.909       2    1  0.2
E16.2       0.3  0.3  0.5
Y95           0  0.2  0.6
T83.511A      0  0.2  0.6
U07.1       0.5  0.5  0.8
Z33.1       1.5    0    0
O24.419       1    0    0
N95.1         0  0.8  0.2
R53.83      0.3  0.5    1
R42         0.5  0.8    1
R51.9         1  0.5  0.3
";

/// Frailty-related codes: falls, mobility, cognition, continence, dependency.
const FRAIL_WHO: Codes = "\
    R26.8 6, R26.2 2, R26.0 1, R29.6 6, W19 5, W19.9 2, W01.9 1, W06.9 1, W10.9 1, \
    W18.9 1, X59.9 1, F05.9 3, F05.1 1, R41.0 3, R41.8 1, R40.0 1, R45.1 1, R47.0 1, \
    R54 3, R32 2, R15 1, Z74.0 2, Z74.1 2, Z74.3 1, Z75.1 2, Z60.2 3, Z91.8 2, Z99.3 1, \
    Z73.6 1, Z50.9 1, E86 4, E87.1 4, E87.6 2, L89.1 2, L89.9 2, L89.2 1, N39.0 5, \
    N17.9 2, M62.8 2, R55 1, I95.1 1, J69.0 1, K59.0 2, H54.7 1, H91.9 1, S00.9 1, \
    T83.5 1, Y95 1, A04.7 1, Z22.3 1, R13 1";
const FRAIL_CM: Codes = "\
    R26.89 6, R26.2 2, R26.81 1, R29.6 6, W19.XXXA 6, W01.0XXA 1, W06.XXXA 1, W10.9XXA 1, \
    W18.30XA 1, F05 4, R41.0 3, R41.82 2, R40.0 1, R45.1 1, R47.01 1, R54 3, R32 2, \
    R15.9 1, Z74.09 2, Z74.1 2, Z74.3 1, Z75.1 2, Z60.2 3, Z91.81 3, Z99.3 1, Z73.6 1, \
    E86.0 4, E87.1 4, E87.6 2, L89.159 2, L89.90 2, L89.609 1, N39.0 5, N17.9 2, \
    M62.81 2, R55 1, I95.1 1, J69.0 1, K59.00 2, H54.7 1, H91.90 1, S00.93XA 1, \
    T83.511A 1, Y95 1, A04.72 1, R13.10 1";
/// External causes coded after an injury, by age.
const FALLS_WHO: Codes = "\
    W19 30, W19.9 15, W19.0 10, W01.9 10, W01.0 6, W06.9 5, W10.9 5, W18.9 8, W18.0 4, \
    X59.9 5";
const FALLS_CM: Codes = "W19.XXXA 40, W01.0XXA 12, W06.XXXA 6, W10.9XXA 6, W18.30XA 8, W18.49XA 4";
const EXTERNAL_YOUNG_WHO: Codes = "V89.2 20, W22.9 10, W25.9 10, W01.9 15, X59.9 10, W19 10";
const EXTERNAL_YOUNG_CM: Codes = "V89.2XXA 20, W22.8XXA 10, W25.XXXA 10, W01.0XXA 15, W19.XXXA 10";
/// What turns up in diagnosis fields that is not a code at all.
const JUNK: Codes = "\
    UNKNOWN 10, 99999 8, I2 6, N/A 8, ? 4, NULL 5, - 4, 000 3, XXXX 3, I5O.9 2, R6 2, \
    E1 2, TBC 3, unknown 3, 0 2, ICD10 1";

/// Codes written immediately after another code (dagger/asterisk pairs and
/// "code also" companions), with the probability that they are.
fn companion(code: &str) -> Option<(&'static str, f64)> {
    Some(match code {
        "E11.4†" => ("G63.2*", 0.9),
        "E10.4†" => ("G59.0*", 0.9),
        "E11.2†" | "E10.2†" => ("N08.3*", 0.9),
        "E11.3†" | "E10.3†" => ("H36.0*", 0.9),
        "G30.9†" => ("F00.9*", 0.9),
        "G30.1†" => ("F00.1*", 0.9),
        "G30.9" | "G30.1" => ("F02.80", 0.8),
        "N18.6" => ("Z99.2", 0.7),
        "O80.0" | "O80.9" | "O80" | "O70.0" | "O34.2" | "O34.211" | "O82.0" | "O48" | "O48.0" => {
            ("Z37.0", 0.9)
        }
        "T39.1" => ("X60.9", 0.8),
        "N39.0" => ("B96.2", 0.3),
        _ => return None,
    })
}

// ---------------------------------------------------------------------------
// Latent conditions.
// ---------------------------------------------------------------------------

#[derive(Clone, Copy, PartialEq, Eq, Debug)]
enum Kind {
    /// Present from its onset on.
    Chronic,
    /// An acute event: admitted on the onset day, history codes afterwards.
    Event,
}

struct CondDef {
    name: &'static str,
    kind: Kind,
    /// Log-odds of having the condition at age 70 (events: within the window
    /// or the five years before it).
    base: f64,
    /// Change in log-odds per decade of age.
    age: f64,
    /// Change in log-odds for men.
    male: f64,
    /// Loadings on the latent morbidity and frailty scores.
    morb: f64,
    frail: f64,
    /// Share of chronic cases whose onset falls inside the window.
    incident: f64,
    /// Probability that an episode codes the condition while it is active
    /// (events: the history code after the acute phase).
    code_p: f64,
    /// Propensity to be the primary reason for an admission.
    admit: f64,
    /// Log-odds of death within 30 days while active (events: in the 30 days
    /// after onset).
    death: f64,
    /// Events: log-odds of death afterwards.
    death_hist: f64,
    /// A condition that must be present first.
    requires: Option<usize>,
    who: Codes,
    cm: Codes,
    hist_who: Codes,
    hist_cm: Codes,
}

const CHRONIC: CondDef = CondDef {
    name: "",
    kind: Kind::Chronic,
    base: -3.0,
    age: 0.0,
    male: 0.0,
    morb: 0.5,
    frail: 0.0,
    incident: 0.05,
    code_p: 0.6,
    admit: 0.0,
    death: 0.0,
    death_hist: 0.0,
    requires: None,
    who: "",
    cm: "",
    hist_who: "",
    hist_cm: "",
};

const OBESITY: usize = 0;
const HTN: usize = 1;
const LIPIDS: usize = 2;
const T2DM: usize = 3;
const T1DM: usize = 4;
const CKD: usize = 5;
const IHD: usize = 6;
const AF: usize = 7;
const HF: usize = 8;
const MI: usize = 9;
const STROKE: usize = 11;
const PVD: usize = 12;
const COPD: usize = 13;
const ASTHMA: usize = 14;
const PARKINSON: usize = 15;
const DEMENTIA: usize = 16;
const PARALYSIS: usize = 18;
const CANCER: usize = 19;
const METS: usize = 20;
const HAEM: usize = 21;
const ALCOHOL: usize = 22;
const DRUGS: usize = 23;
const LIVER_MILD: usize = 24;
const LIVER_SEVERE: usize = 25;
const DEPRESSION: usize = 26;
const PSYCHOSIS: usize = 27;
const RHEUM: usize = 29;
const HIV: usize = 31;
const ANAEMIA: usize = 32;
const COAG: usize = 33;
const MALNUTRITION: usize = 34;
const PULMONARY_CIRCULATION: usize = 35;
const OSTEOPOROSIS: usize = 37;
const HIPFRACTURE: usize = 39;
/// Number of latent conditions (`COND` is indexed by the constants above).
const NC: usize = 40;

const EVENTS: [usize; 3] = [MI, STROKE, HIPFRACTURE];

const COND: [CondDef; NC] = [
    CondDef {
        name: "obesity",
        base: -2.0,
        age: -0.15,
        morb: 0.3,
        code_p: 0.45,
        incident: 0.02,
        who: OBESITY_WHO,
        cm: OBESITY_CM,
        ..CHRONIC
    },
    CondDef {
        name: "hypertension",
        base: -0.3,
        age: 0.45,
        male: 0.1,
        code_p: 0.75,
        admit: 0.1,
        incident: 0.05,
        who: HTN_WHO,
        cm: HTN_CM,
        ..CHRONIC
    },
    CondDef {
        name: "lipids",
        base: -1.3,
        age: 0.2,
        male: 0.3,
        morb: 0.3,
        code_p: 0.5,
        incident: 0.02,
        who: LIPIDS_WHO,
        cm: LIPIDS_CM,
        ..CHRONIC
    },
    CondDef {
        name: "diabetes_t2",
        base: -1.9,
        age: 0.25,
        male: 0.25,
        code_p: 0.85,
        admit: 0.5,
        death: 0.15,
        incident: 0.05,
        who: T2DM_WHO,
        cm: T2DM_CM,
        ..CHRONIC
    },
    CondDef {
        name: "diabetes_t1",
        base: -5.0,
        age: -0.3,
        male: 0.2,
        code_p: 0.9,
        admit: 0.8,
        death: 0.3,
        incident: 0.0,
        who: T1DM_WHO,
        cm: T1DM_CM,
        ..CHRONIC
    },
    CondDef {
        name: "ckd",
        base: -2.3,
        age: 0.6,
        male: 0.1,
        code_p: 0.65,
        admit: 0.5,
        death: 0.5,
        incident: 0.08,
        who: CKD_WHO,
        cm: CKD_CM,
        ..CHRONIC
    },
    CondDef {
        name: "ihd",
        base: -2.1,
        age: 0.5,
        male: 0.6,
        code_p: 0.6,
        admit: 0.6,
        death: 0.2,
        incident: 0.05,
        who: IHD_WHO,
        cm: IHD_CM,
        ..CHRONIC
    },
    CondDef {
        name: "af",
        base: -2.1,
        age: 0.7,
        male: 0.3,
        code_p: 0.75,
        admit: 0.7,
        death: 0.3,
        incident: 0.08,
        who: AF_WHO,
        cm: AF_CM,
        ..CHRONIC
    },
    CondDef {
        name: "heart_failure",
        base: -3.0,
        age: 0.6,
        male: 0.2,
        code_p: 0.75,
        admit: 1.5,
        death: 0.8,
        incident: 0.08,
        who: HF_WHO,
        cm: HF_CM,
        ..CHRONIC
    },
    CondDef {
        name: "mi",
        kind: Kind::Event,
        base: -3.6,
        age: 0.4,
        male: 0.6,
        code_p: 0.5,
        death: 1.3,
        death_hist: 0.3,
        who: MI_WHO,
        cm: MI_CM,
        hist_who: MI_HIST,
        hist_cm: MI_HIST,
        ..CHRONIC
    },
    CondDef {
        name: "valve",
        base: -3.3,
        age: 0.6,
        code_p: 0.6,
        admit: 0.3,
        death: 0.3,
        incident: 0.05,
        who: VALVE_WHO,
        cm: VALVE_CM,
        ..CHRONIC
    },
    CondDef {
        name: "stroke",
        kind: Kind::Event,
        base: -3.6,
        age: 0.6,
        male: 0.1,
        code_p: 0.45,
        death: 1.5,
        death_hist: 0.4,
        who: STROKE_WHO,
        cm: STROKE_CM,
        hist_who: STROKE_HIST_WHO,
        hist_cm: STROKE_HIST_CM,
        ..CHRONIC
    },
    CondDef {
        name: "pvd",
        base: -3.4,
        age: 0.5,
        male: 0.5,
        code_p: 0.6,
        admit: 0.4,
        death: 0.4,
        incident: 0.05,
        who: PVD_WHO,
        cm: PVD_CM,
        ..CHRONIC
    },
    CondDef {
        name: "copd",
        base: -2.4,
        age: 0.35,
        male: 0.2,
        code_p: 0.75,
        admit: 1.2,
        death: 0.5,
        incident: 0.03,
        who: COPD_WHO,
        cm: COPD_CM,
        ..CHRONIC
    },
    CondDef {
        name: "asthma",
        base: -2.6,
        age: -0.1,
        male: -0.3,
        code_p: 0.6,
        admit: 0.4,
        incident: 0.02,
        who: ASTHMA_WHO,
        cm: ASTHMA_CM,
        ..CHRONIC
    },
    CondDef {
        name: "parkinson",
        base: -4.2,
        age: 0.7,
        male: 0.4,
        frail: 0.3,
        code_p: 0.85,
        admit: 0.3,
        death: 0.4,
        incident: 0.03,
        who: PARKINSON_WHO,
        cm: PARKINSON_CM,
        ..CHRONIC
    },
    CondDef {
        name: "dementia",
        base: -3.1,
        age: 1.0,
        male: -0.1,
        frail: 0.5,
        code_p: 0.8,
        admit: 0.5,
        death: 0.9,
        incident: 0.1,
        who: DEMENTIA_WHO,
        cm: DEMENTIA_CM,
        ..CHRONIC
    },
    CondDef {
        name: "epilepsy",
        base: -4.0,
        code_p: 0.8,
        admit: 0.5,
        death: 0.3,
        incident: 0.02,
        who: EPILEPSY_WHO,
        cm: EPILEPSY_CM,
        ..CHRONIC
    },
    CondDef {
        name: "paralysis",
        base: -4.6,
        age: 0.2,
        code_p: 0.7,
        admit: 0.2,
        death: 0.6,
        incident: 0.03,
        who: PARALYSIS_WHO,
        cm: PARALYSIS_CM,
        ..CHRONIC
    },
    CondDef {
        name: "cancer",
        base: -2.8,
        age: 0.4,
        male: 0.2,
        code_p: 0.7,
        admit: 1.0,
        death: 0.9,
        incident: 0.15,
        who: CANCER_WHO,
        cm: CANCER_CM,
        ..CHRONIC
    },
    CondDef {
        name: "metastatic",
        base: -1.3,
        morb: 0.2,
        code_p: 0.8,
        admit: 0.8,
        death: 1.8,
        incident: 0.3,
        requires: Some(CANCER),
        who: METS_WHO,
        cm: METS_CM,
        ..CHRONIC
    },
    CondDef {
        name: "haem_malignancy",
        base: -4.3,
        age: 0.4,
        male: 0.3,
        code_p: 0.8,
        admit: 0.8,
        death: 1.0,
        incident: 0.1,
        who: HAEM_WHO,
        cm: HAEM_CM,
        ..CHRONIC
    },
    CondDef {
        name: "alcohol",
        base: -3.0,
        age: -0.3,
        male: 0.8,
        code_p: 0.6,
        admit: 0.6,
        death: 0.3,
        incident: 0.02,
        who: ALCOHOL_WHO,
        cm: ALCOHOL_CM,
        ..CHRONIC
    },
    CondDef {
        name: "drugs",
        base: -4.4,
        age: -0.8,
        male: 0.6,
        code_p: 0.6,
        admit: 0.5,
        death: 0.3,
        incident: 0.02,
        who: DRUGS_WHO,
        cm: DRUGS_CM,
        ..CHRONIC
    },
    CondDef {
        name: "liver_mild",
        base: -3.9,
        male: 0.3,
        code_p: 0.7,
        admit: 0.6,
        death: 0.6,
        incident: 0.05,
        who: LIVER_MILD_WHO,
        cm: LIVER_MILD_CM,
        ..CHRONIC
    },
    CondDef {
        name: "liver_severe",
        base: -1.5,
        morb: 0.2,
        code_p: 0.85,
        admit: 1.0,
        death: 1.7,
        incident: 0.15,
        requires: Some(LIVER_MILD),
        who: LIVER_SEVERE_WHO,
        cm: LIVER_SEVERE_CM,
        ..CHRONIC
    },
    CondDef {
        name: "depression",
        base: -2.3,
        age: -0.05,
        male: -0.5,
        code_p: 0.55,
        admit: 0.3,
        death: 0.2,
        incident: 0.05,
        who: DEPRESSION_WHO,
        cm: DEPRESSION_CM,
        ..CHRONIC
    },
    CondDef {
        name: "psychosis",
        base: -4.2,
        age: -0.2,
        male: 0.2,
        code_p: 0.8,
        admit: 0.5,
        death: 0.3,
        incident: 0.01,
        who: PSYCHOSIS_WHO,
        cm: PSYCHOSIS_CM,
        ..CHRONIC
    },
    CondDef {
        name: "hypothyroid",
        base: -2.7,
        age: 0.3,
        male: -1.0,
        morb: 0.3,
        code_p: 0.7,
        incident: 0.03,
        who: HYPOTHYROID_WHO,
        cm: HYPOTHYROID_CM,
        ..CHRONIC
    },
    CondDef {
        name: "rheumatic",
        base: -3.8,
        age: 0.2,
        male: -0.6,
        code_p: 0.7,
        admit: 0.2,
        death: 0.2,
        incident: 0.03,
        who: RHEUM_WHO,
        cm: RHEUM_CM,
        ..CHRONIC
    },
    CondDef {
        name: "peptic_ulcer",
        base: -4.1,
        age: 0.3,
        male: 0.2,
        code_p: 0.5,
        admit: 0.3,
        death: 0.3,
        incident: 0.05,
        who: ULCER_WHO,
        cm: ULCER_CM,
        ..CHRONIC
    },
    CondDef {
        name: "hiv",
        base: -6.0,
        age: -0.5,
        male: 0.8,
        code_p: 0.9,
        admit: 0.3,
        death: 0.5,
        incident: 0.01,
        who: HIV_WHO,
        cm: HIV_CM,
        ..CHRONIC
    },
    CondDef {
        name: "anaemia",
        base: -2.9,
        age: 0.4,
        male: -0.2,
        code_p: 0.5,
        admit: 0.4,
        death: 0.3,
        incident: 0.15,
        who: ANAEMIA_WHO,
        cm: ANAEMIA_CM,
        ..CHRONIC
    },
    CondDef {
        name: "coagulopathy",
        base: -4.6,
        age: 0.3,
        male: 0.1,
        code_p: 0.6,
        admit: 0.2,
        death: 0.7,
        incident: 0.1,
        who: COAG_WHO,
        cm: COAG_CM,
        ..CHRONIC
    },
    CondDef {
        name: "malnutrition",
        base: -4.1,
        age: 0.5,
        frail: 0.4,
        code_p: 0.5,
        admit: 0.2,
        death: 0.8,
        incident: 0.2,
        who: MALNUTRITION_WHO,
        cm: MALNUTRITION_CM,
        ..CHRONIC
    },
    CondDef {
        name: "pulm_circulation",
        base: -4.3,
        age: 0.4,
        code_p: 0.6,
        admit: 0.4,
        death: 0.6,
        incident: 0.15,
        who: PULMONARY_CIRCULATION_WHO,
        cm: PULMONARY_CIRCULATION_CM,
        ..CHRONIC
    },
    CondDef {
        name: "gord",
        base: -2.3,
        age: 0.1,
        morb: 0.3,
        code_p: 0.4,
        incident: 0.02,
        who: GORD_WHO,
        cm: GORD_CM,
        ..CHRONIC
    },
    CondDef {
        name: "osteoporosis",
        base: -2.7,
        age: 0.7,
        male: -1.4,
        frail: 0.4,
        code_p: 0.45,
        death: 0.1,
        incident: 0.05,
        who: OSTEOPOROSIS_WHO,
        cm: OSTEOPOROSIS_CM,
        ..CHRONIC
    },
    CondDef {
        name: "sensory",
        base: -2.9,
        age: 0.8,
        morb: 0.2,
        frail: 0.4,
        code_p: 0.35,
        death: 0.1,
        incident: 0.05,
        who: SENSORY_WHO,
        cm: SENSORY_CM,
        ..CHRONIC
    },
    CondDef {
        name: "hip_fracture",
        kind: Kind::Event,
        base: -4.4,
        age: 1.0,
        male: -0.6,
        morb: 0.2,
        frail: 0.6,
        code_p: 0.3,
        death: 1.0,
        death_hist: 0.2,
        who: HIPFRACTURE_WHO,
        cm: HIPFRACTURE_CM,
        hist_who: HIPFRACTURE_HIST_WHO,
        hist_cm: HIPFRACTURE_HIST_CM,
        ..CHRONIC
    },
];

/// (from, to, change in the log-odds of `to` when `from` is present). Every
/// `from` precedes its `to` in `COND`.
const DEPS: &[(usize, usize, f64)] = &[
    (OBESITY, HTN, 0.8),
    (OBESITY, T2DM, 1.2),
    (OBESITY, ASTHMA, 0.3),
    (HTN, CKD, 0.7),
    (HTN, IHD, 0.5),
    (HTN, HF, 0.6),
    (HTN, STROKE, 0.5),
    (LIPIDS, IHD, 0.6),
    (T2DM, CKD, 1.0),
    (T2DM, IHD, 0.6),
    (T2DM, HF, 0.5),
    (T2DM, PVD, 0.8),
    (T1DM, CKD, 1.2),
    (IHD, HF, 1.0),
    (IHD, MI, 1.4),
    (AF, HF, 0.8),
    (AF, STROKE, 0.9),
    (COPD, PULMONARY_CIRCULATION, 0.8),
    (STROKE, PARALYSIS, 2.5),
    (STROKE, DEMENTIA, 0.6),
    (PARKINSON, DEMENTIA, 0.8),
    (DEMENTIA, MALNUTRITION, 0.6),
    (DEMENTIA, HIPFRACTURE, 0.8),
    (PARKINSON, HIPFRACTURE, 0.7),
    (CANCER, ANAEMIA, 0.8),
    (CANCER, MALNUTRITION, 1.0),
    (CANCER, PULMONARY_CIRCULATION, 0.8),
    (METS, MALNUTRITION, 0.8),
    (HAEM, ANAEMIA, 1.2),
    (HAEM, COAG, 0.8),
    (ALCOHOL, LIVER_MILD, 2.5),
    (ALCOHOL, LIVER_SEVERE, 0.8),
    (ALCOHOL, DEPRESSION, 0.7),
    (DRUGS, PSYCHOSIS, 0.8),
    (DRUGS, HIV, 1.5),
    (DRUGS, LIVER_MILD, 1.0),
    (LIVER_MILD, COAG, 1.0),
    (CKD, ANAEMIA, 1.0),
    (RHEUM, OSTEOPOROSIS, 0.6),
    (OSTEOPOROSIS, HIPFRACTURE, 1.2),
];

/// Log-odds of death within 30 days of an admission at age 70 with no latent
/// condition, and its change per year of age and per unit of latent frailty.
const DEATH_BASE: f64 = -5.5;
const DEATH_AGE: f64 = 0.045;
const DEATH_FRAIL: f64 = 0.3;

/// Onset of a condition the patient does not have.
const ABSENT: i32 = i32::MAX;
/// Largest delay (days) of a late-arriving record, which moves it later in
/// the file than its admission date.
const MAX_DELAY: u32 = 120;
const MAX_DAYS: u32 = 7305;
const MAX_FIELDS: usize = 250;

// ---------------------------------------------------------------------------
// Tables ready for sampling.
// ---------------------------------------------------------------------------

struct Table {
    codes: Vec<&'static str>,
    cum: Vec<u64>,
    total: u64,
}

impl Table {
    fn new<I: IntoIterator<Item = (&'static str, f64)>>(entries: I) -> Table {
        let mut codes = Vec::new();
        let mut cum = Vec::new();
        let mut total = 0u64;
        for (code, w) in entries {
            total += (w * 1000.0).round() as u64;
            codes.push(code);
            cum.push(total);
        }
        assert!(total > 0, "a code table needs a positive weight");
        Table { codes, cum, total }
    }

    fn simple(table: Codes) -> Table {
        Table::new(entries(table).map(|(c, w)| (c, w[0])))
    }

    fn banded(table: BandedCodes, band: usize) -> Table {
        Table::new(entries(table).map(|(c, w)| (c, w[band])))
    }

    fn pick_r(&self, r: u64) -> &'static str {
        let x = ((r as u128 * self.total as u128) >> 64) as u64;
        self.codes[self.cum.partition_point(|&c| c <= x)]
    }

    fn pick(&self, rng: &mut Rng) -> &'static str {
        self.pick_r(rng.next_u64())
    }

    /// A code that suits the patient's sex and age, if one turns up.
    fn pick_fit(&self, rng: &mut Rng, sex: u8, age: u32) -> Option<&'static str> {
        (0..16).map(|_| self.pick(rng)).find(|c| fits(c, sex, age))
    }
}

const MALE: u8 = b'M';
const FEMALE: u8 = b'F';

fn two_digits(b: &[u8]) -> Option<u32> {
    match (b.get(1), b.get(2)) {
        (Some(x), Some(y)) if x.is_ascii_digit() && y.is_ascii_digit() => {
            Some(u32::from(x - b'0') * 10 + u32::from(y - b'0'))
        }
        _ => None,
    }
}

/// Whether a code suits a patient: sex-specific and obstetric codes.
fn fits(code: &str, sex: u8, age: u32) -> bool {
    let b = code.as_bytes();
    let n = two_digits(b).unwrap_or(0);
    match b[0] {
        b'O' => sex == FEMALE && age <= 50,
        b'C' if (50..=58).contains(&n) => sex == FEMALE,
        b'C' if (60..=63).contains(&n) => sex == MALE,
        b'N' if (40..=51).contains(&n) => sex == MALE,
        b'N' if (70..=98).contains(&n) => sex == FEMALE,
        b'D' if (25..=28).contains(&n) => sex == FEMALE,
        b'Z' if (32..=39).contains(&n) => sex == FEMALE && age <= 50,
        _ => true,
    }
}

struct CondTables {
    who: Table,
    cm: Table,
    hist_who: Option<Table>,
    hist_cm: Option<Table>,
}

struct Config {
    episodes: u64,
    patients: u64,
    fields: usize,
    long: bool,
    seed: u64,
    start: i64,
    days: u32,
    shuffle: bool,
    threads: usize,
    output: Option<String>,
    quiet: bool,
    /// Wards per site (0: no ward column).
    wards: u64,
}

struct Ctx {
    seed: u64,
    wards: u64,
    days: u32,
    fields: usize,
    long: bool,
    /// Absolute day number of the window's middle.
    mid: i64,
    age_lo: f64,
    age_hi: f64,
    dates: Vec<[u8; 10]>,
    civil: Vec<(i32, u32, u32)>,
    conds: Vec<CondTables>,
    deps_from: Vec<Vec<(usize, f64)>>,
    acute: [Table; 3],
    acute_cm: [Table; 3],
    second: [Table; 3],
    second_cm: [Table; 3],
    frail: Table,
    frail_cm: Table,
    falls: Table,
    falls_cm: Table,
    ext_young: Table,
    ext_young_cm: Table,
    junk: Table,
    sites: Table,
    /// Mean number of acute secondary and of frailty-related codes, by age.
    acute_rate: Vec<f64>,
    frail_rate: Vec<f64>,
    episode_width: usize,
    patient_width: usize,
}

fn digits(mut n: u64) -> usize {
    let mut d = 1;
    while n >= 10 {
        n /= 10;
        d += 1;
    }
    d
}

impl Ctx {
    fn new(cfg: &Config) -> Ctx {
        let mut dates = Vec::new();
        let mut civil = Vec::new();
        for off in 0..(cfg.days + MAX_DELAY) as i64 {
            let (y, m, d) = civil_from_days(cfg.start + off);
            let mut s = [0u8; 10];
            let text = format!("{y:04}-{m:02}-{d:02}");
            s.copy_from_slice(text.as_bytes());
            dates.push(s);
            civil.push((y, m, d));
        }
        // Ages at the window's middle that keep every admission in 18..=100.
        let half = (f64::from(cfg.days) / 2.0 + 3.0) / 365.2425;
        let banded = |t: BandedCodes| [0, 1, 2].map(|b| Table::banded(t, b));
        let mut deps_from = vec![Vec::new(); NC];
        for &(from, to, b) in DEPS {
            deps_from[from].push((to, b));
        }
        Ctx {
            seed: cfg.seed,
            days: cfg.days,
            fields: cfg.fields,
            wards: cfg.wards,
            long: cfg.long,
            mid: cfg.start + i64::from(cfg.days / 2),
            age_lo: 18.0 + half,
            age_hi: 101.0 - half,
            dates,
            civil,
            conds: COND
                .iter()
                .map(|d| CondTables {
                    who: Table::simple(d.who),
                    cm: Table::simple(d.cm),
                    hist_who: (!d.hist_who.is_empty()).then(|| Table::simple(d.hist_who)),
                    hist_cm: (!d.hist_cm.is_empty()).then(|| Table::simple(d.hist_cm)),
                })
                .collect(),
            deps_from,
            acute: banded(ACUTE_WHO),
            acute_cm: banded(ACUTE_CM),
            second: banded(SECONDARY_WHO),
            second_cm: banded(SECONDARY_CM),
            frail: Table::simple(FRAIL_WHO),
            frail_cm: Table::simple(FRAIL_CM),
            falls: Table::simple(FALLS_WHO),
            falls_cm: Table::simple(FALLS_CM),
            ext_young: Table::simple(EXTERNAL_YOUNG_WHO),
            ext_young_cm: Table::simple(EXTERNAL_YOUNG_CM),
            junk: Table::simple(JUNK),
            sites: Table::new(SITES.iter().map(|s| (s.code, s.weight))),
            acute_rate: (0..=120)
                .map(|a| 0.4 + 3.0 * ((f64::from(a) - 18.0).max(0.0) / 82.0).powf(1.3))
                .collect(),
            frail_rate: (0..=120)
                .map(|a| 2.5 * ((f64::from(a) - 62.0) / 30.0).clamp(0.0, 1.3).powf(1.6))
                .collect(),
            episode_width: digits(cfg.episodes),
            patient_width: digits(cfg.patients),
        }
    }

    fn site_index(&self, rng: &mut Rng) -> usize {
        let code = self.sites.pick(rng);
        SITES.iter().position(|s| s.code == code).unwrap_or(0)
    }
}

// ---------------------------------------------------------------------------
// Patients.
// ---------------------------------------------------------------------------

/// A patient as stored between planning and writing: about 30 bytes.
#[derive(Clone, Copy)]
struct Patient {
    birth: (i16, u8, u8),
    frailty: f32,
    sex: u8,
    home_site: u8,
    /// The patient's conditions are `Store::conds[first..first + count]`.
    first: u32,
    count: u8,
}

/// Every patient, with the onsets of their conditions (condition, day offset).
#[derive(Default)]
struct Store {
    patients: Vec<Patient>,
    conds: Vec<(u8, i16)>,
}

/// A patient as the generators use it.
struct Profile {
    sex: u8,
    birth: (i32, u32, u32),
    frailty: f64,
    home_site: usize,
    /// Day offset (from the window start) of each condition's onset; negative
    /// is before the window, `ABSENT` is never.
    onset: [i32; NC],
    /// The patient's conditions, in `COND` order.
    present: [u8; NC],
    count: usize,
}

impl Profile {
    fn conditions(&self) -> impl Iterator<Item = usize> + '_ {
        self.present[..self.count].iter().map(|&c| usize::from(c))
    }

    fn from_store(store: &Store, pidx: u64) -> Profile {
        let p = store.patients[pidx as usize];
        let mut prof = Profile {
            sex: p.sex,
            birth: (
                i32::from(p.birth.0),
                u32::from(p.birth.1),
                u32::from(p.birth.2),
            ),
            frailty: f64::from(p.frailty),
            home_site: usize::from(p.home_site),
            onset: [ABSENT; NC],
            present: [0; NC],
            count: 0,
        };
        let first = p.first as usize;
        for &(c, on) in &store.conds[first..first + usize::from(p.count)] {
            prof.onset[usize::from(c)] = i32::from(on);
            prof.present[prof.count] = c;
            prof.count += 1;
        }
        prof
    }
}

/// A stable random number per patient and condition: the patient's usual
/// code for it.
fn preference(seed: u64, pidx: u64, c: usize) -> u64 {
    mix64(seed ^ mix64(pidx.wrapping_mul(GOLDEN) ^ mix64(c as u64 + 0x51)))
}

fn kumaraswamy(rng: &mut Rng, a: f64, b: f64) -> f64 {
    (1.0 - (1.0 - rng.unit()).powf(1.0 / b)).powf(1.0 / a)
}

/// Draws a patient; returns the profile and its utilisation weight (the
/// patient's share of the episodes beyond their first).
fn draw_patient(ctx: &Ctx, pidx: u64) -> (Profile, f64) {
    let mut rng = Rng::stream(ctx.seed, STREAM_PROFILE, pidx, 0);
    let young = rng.chance(0.14);
    let x = if young {
        rng.unit() * ((48.0 - ctx.age_lo) / (ctx.age_hi - ctx.age_lo)).clamp(0.05, 1.0)
    } else {
        kumaraswamy(&mut rng, 2.4, 1.5)
    };
    let age_mid = ctx.age_lo + x * (ctx.age_hi - ctx.age_lo);
    let u = rng.unit();
    let sex = if u < 0.0015 {
        b'U'
    } else if u < 0.5215 {
        FEMALE
    } else {
        MALE
    };
    let morbidity = rng.normal();
    let frailty = rng.normal();
    let usage = rng.normal();
    let home_site = ctx.site_index(&mut rng);
    // Some patients are admitted once only (more so the young); the others
    // share the remaining episodes by a skewed utilisation weight.
    let one_off = rng.chance((0.45 - 0.004 * (age_mid - 40.0)).clamp(0.2, 0.45));
    let weight = if one_off {
        0.0
    } else {
        (usage + 0.35 * morbidity + 0.012 * (age_mid - 60.0))
            .exp()
            .min(40.0)
    };
    let mut p = Profile {
        sex,
        birth: civil_from_days(ctx.mid - (age_mid * 365.2425).round() as i64),
        frailty,
        home_site,
        onset: [ABSENT; NC],
        present: [0; NC],
        count: 0,
    };
    let male = if sex == MALE { 1.0 } else { 0.0 };
    let decades = (age_mid - 70.0) / 10.0;
    let mut boost = [0.0f64; NC];
    let days = i64::from(ctx.days);
    for (c, def) in COND.iter().enumerate() {
        let required = def.requires.map_or(0, |q| p.onset[q]);
        if required == ABSENT {
            continue;
        }
        let logit = def.base
            + def.age * decades
            + def.male * male
            + def.morb * morbidity
            + def.frail * frailty
            + boost[c];
        if !rng.chance(sigmoid(logit)) {
            continue;
        }
        let onset = match def.kind {
            Kind::Event => rng.below((5 * 365 + days) as u64) as i64 - 5 * 365,
            Kind::Chronic if rng.chance(def.incident) => rng.below(days as u64) as i64,
            Kind::Chronic => -1,
        };
        p.onset[c] = (onset as i32).max(required);
        p.present[p.count] = c as u8;
        p.count += 1;
        for &(to, b) in &ctx.deps_from[c] {
            boost[to] += b;
        }
    }
    (p, weight)
}

#[derive(Clone, Copy, Default, Debug, PartialEq)]
struct Visit {
    day: u32,
    delay: u32,
    died: bool,
}

fn death_prob(ctx: &Ctx, p: &Profile, day: u32) -> f64 {
    let age = age_at(p.birth, ctx.civil[day as usize]);
    let mut x = DEATH_BASE + DEATH_AGE * (f64::from(age) - 70.0) + DEATH_FRAIL * p.frailty;
    let d = day as i32;
    for c in p.conditions() {
        let (def, on) = (&COND[c], p.onset[c]);
        if on > d {
            continue;
        }
        x += match def.kind {
            Kind::Chronic => def.death,
            Kind::Event if d - on < 30 => def.death,
            Kind::Event => def.death_hist,
        };
    }
    sigmoid(x)
}

/// The patient's admissions, in date order, for a share of `target` episodes
/// (fewer if the patient dies first, unless `early_death` is false).
fn timeline(
    ctx: &Ctx,
    p: &Profile,
    pidx: u64,
    target: usize,
    early_death: bool,
    out: &mut Vec<Visit>,
) {
    let mut rng = Rng::stream(ctx.seed, STREAM_TIMELINE, pidx, 0);
    out.clear();
    let days = ctx.days;
    for &e in &EVENTS {
        let on = p.onset[e];
        if on >= 0 && (on as u32) < days && out.len() < target {
            out.push(Visit {
                day: on as u32,
                ..Visit::default()
            });
        }
    }
    while out.len() < target {
        let day = if !out.is_empty() && rng.chance(0.22) {
            // A readmission soon after an earlier stay.
            let base = out[rng.below(out.len() as u64) as usize].day;
            let gap = 1 + (rng.unit() * rng.unit() * 30.0) as u32;
            if base + gap < days {
                base + gap
            } else {
                rng.below(u64::from(days)) as u32
            }
        } else {
            rng.below(u64::from(days)) as u32
        };
        out.push(Visit {
            day,
            ..Visit::default()
        });
    }
    out.sort_unstable_by_key(|v| v.day);
    let n = out.len();
    let mut death = None;
    for (j, v) in out.iter().enumerate() {
        if rng.chance(death_prob(ctx, p, v.day)) && (early_death || j + 1 == n) {
            death = Some((j, v.day + rng.below(30) as u32));
            break;
        }
    }
    if let Some((j, death_day)) = death {
        out.truncate(j + 1);
        for v in out.iter_mut() {
            v.died = v.day + 30 > death_day;
        }
    }
    for v in out.iter_mut() {
        if rng.chance(0.03) {
            v.delay = 1 + rng.below(u64::from(MAX_DELAY)) as u32;
        }
    }
}

// ---------------------------------------------------------------------------
// Planning: who is admitted when.
// ---------------------------------------------------------------------------

/// An episode in 64 bits: the day it appears in the feed (admission day plus
/// delay; 13 bits), the patient (31), the patient's visit number (12), the
/// delay (7) and the death flag (1). Sorting the keys sorts the file.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord)]
struct Key(u64);

const MAX_PATIENTS: u64 = (1 << 31) - 1;
const MAX_VISITS: usize = (1 << 12) - 1;

impl Key {
    fn new(pidx: u64, j: usize, v: Visit) -> Key {
        Key((u64::from(v.day + v.delay) << 51)
            | (pidx << 20)
            | ((j as u64) << 8)
            | (u64::from(v.delay) << 1)
            | u64::from(v.died))
    }

    fn patient(self) -> u64 {
        (self.0 >> 20) & MAX_PATIENTS
    }

    fn visit_number(self) -> u64 {
        (self.0 >> 8) & MAX_VISITS as u64
    }

    fn visit(self) -> Visit {
        let delay = ((self.0 >> 1) & 0x7F) as u32;
        Visit {
            day: (self.0 >> 51) as u32 - delay,
            delay,
            died: self.0 & 1 == 1,
        }
    }
}

struct Plan {
    store: Store,
    /// Episodes in file order.
    keys: Vec<Key>,
    deaths: u64,
}

fn plan(ctx: &Ctx, cfg: &Config) -> Result<Plan, String> {
    let (n, np) = (cfg.episodes, cfg.patients as usize);
    // Patients, drawn in parallel.
    let mut store = Store::default();
    let mut weights = Vec::with_capacity(np);
    store.patients.reserve(np);
    in_chunks(
        np,
        cfg.threads,
        |range, _| {
            let mut part = Store::default();
            let mut w = Vec::with_capacity(range.len());
            for i in range {
                let (p, weight) = draw_patient(ctx, i as u64);
                part.patients.push(Patient {
                    birth: (p.birth.0 as i16, p.birth.1 as u8, p.birth.2 as u8),
                    frailty: p.frailty as f32,
                    sex: p.sex,
                    home_site: p.home_site as u8,
                    first: part.conds.len() as u32,
                    count: p.count as u8,
                });
                part.conds
                    .extend(p.conditions().map(|c| (c as u8, p.onset[c] as i16)));
                w.push(weight);
            }
            (part, w)
        },
        |(part, w)| {
            let base = store.conds.len() as u32;
            store.patients.extend(part.patients.iter().map(|p| Patient {
                first: p.first + base,
                ..*p
            }));
            store.conds.extend(part.conds);
            weights.extend(w);
            Ok(())
        },
    )
    .map_err(|e| e.to_string())?;

    // Episodes shared out by weight (every patient has one), then each
    // patient's admissions. A death hands the unused episodes on.
    let mut total: f64 = weights.iter().sum();
    if total == 0.0 {
        weights.iter_mut().for_each(|w| *w = 1.0);
        total = np as f64;
    }
    let extra = n - np as u64;
    let mut keys = Vec::with_capacity(n as usize);
    let mut visits = Vec::new();
    let (mut cum, mut allocated, mut carry, mut deaths) = (0.0f64, 0u64, 0u64, 0u64);
    for (i, w) in weights.iter().enumerate() {
        cum += w;
        let upto = if i + 1 == np {
            extra
        } else {
            (((cum / total) * extra as f64).floor() as u64).min(extra)
        };
        let want = 1 + upto - allocated + carry;
        allocated = upto;
        let target = (want as usize).min(MAX_VISITS);
        let p = Profile::from_store(&store, i as u64);
        timeline(ctx, &p, i as u64, target, i + 1 < np, &mut visits);
        carry = want - visits.len() as u64;
        for (j, v) in visits.iter().enumerate() {
            deaths += u64::from(v.died);
            keys.push(Key::new(i as u64, j, *v));
        }
    }
    if carry != 0 {
        return Err(format!(
            "could not place {carry} episodes: too many episodes per patient"
        ));
    }
    keys.sort_unstable();
    Ok(Plan {
        store,
        keys,
        deaths,
    })
}

// ---------------------------------------------------------------------------
// Episodes.
// ---------------------------------------------------------------------------

const DOT: u8 = 1;
const LOWER: u8 = 2;
const MARK: u8 = 4;
const FILLER: u8 = 8;
const RAW: u8 = 16;

#[derive(Clone, Copy, Debug, PartialEq)]
struct Item {
    code: &'static str,
    poa: u8,
    style: u8,
}

const EMPTY: Item = Item {
    code: "",
    poa: 0,
    style: 0,
};

#[derive(Clone, Copy)]
enum Role {
    Primary,
    Chronic,
    Acute,
    Frailty,
}

#[derive(Default)]
struct Episode {
    patient: u64,
    site: usize,
    day: u32,
    age: u32,
    /// 0: age present; 1: empty; 2: `NA`; 3: `N/K`.
    age_missing: u8,
    sex: u8,
    died: bool,
    items: Vec<Item>,
}

#[derive(Default)]
struct Scratch {
    units: Vec<(Item, Item)>,
    chosen: Vec<&'static str>,
    ep: Episode,
}

fn poa_flag(rng: &mut Rng, site: &Site, code: &str, role: Role) -> u8 {
    if !site.poa || matches!(code.as_bytes()[0], b'V' | b'W' | b'X' | b'Y') {
        return 0;
    }
    let u = rng.unit();
    let (y, n, unk) = match role {
        Role::Primary => (0.97, 0.97, 1.0),
        Role::Chronic => (0.95, 0.95, 0.98),
        Role::Acute => (0.72, 0.94, 0.99),
        Role::Frailty => (0.58, 0.95, 1.0),
    };
    if u < y {
        b'Y'
    } else if u < n {
        b'N'
    } else if u < unk {
        b'U'
    } else {
        b'W'
    }
}

fn make_item(rng: &mut Rng, site: &Site, code: &'static str, role: Role) -> Item {
    // One draw decides the four style choices, 16 bits each.
    let r = rng.next_u64();
    let below = |shift: u32, p: f64| (((r >> shift) & 0xFFFF) as f64) < p * 65536.0;
    let mut style = 0;
    if below(0, site.dotted) {
        style |= DOT;
    }
    if below(16, site.lower) {
        style |= LOWER;
    }
    if below(32, site.marks) {
        style |= MARK;
    }
    if below(48, site.filler) {
        style |= FILLER;
    }
    Item {
        code,
        poa: poa_flag(rng, site, code, role),
        style,
    }
}

struct EpisodeGen<'a> {
    ctx: &'a Ctx,
    prof: &'a Profile,
    pidx: u64,
    rng: Rng,
    site: &'static Site,
    cm: bool,
    age: u32,
}

impl<'a> EpisodeGen<'a> {
    /// The patient's code for a condition: usually their usual one.
    fn cond_code(&mut self, table: &Table, c: usize) -> &'static str {
        if self.rng.chance(0.75) {
            for attempt in 0..4 {
                let r = preference(self.ctx.seed, self.pidx, c).wrapping_add(attempt);
                let code = table.pick_r(mix64(r));
                if fits(code, self.prof.sex, self.age) {
                    return code;
                }
            }
        }
        table
            .pick_fit(&mut self.rng, self.prof.sex, self.age)
            .unwrap_or(table.codes[0])
    }

    fn tables(&self, c: usize) -> &'a Table {
        let t = &self.ctx.conds[c];
        if self.cm {
            &t.cm
        } else {
            &t.who
        }
    }

    fn hist_table(&self, c: usize) -> &'a Table {
        let t = &self.ctx.conds[c];
        let hist = if self.cm { &t.hist_cm } else { &t.hist_who };
        hist.as_ref().unwrap_or(&t.who)
    }

    fn unit(&mut self, code: &'static str, role: Role) -> (Item, Item) {
        let first = make_item(&mut self.rng, self.site, code, role);
        // A companion is written by the same hand, in the same style.
        let second = match companion(code) {
            Some((c, p)) if self.rng.chance(p) => Item {
                style: first.style,
                ..make_item(&mut self.rng, self.site, c, role)
            },
            _ => EMPTY,
        };
        (first, second)
    }
}

fn gen_episode(ctx: &Ctx, prof: &Profile, pidx: u64, j: u64, visit: Visit, sc: &mut Scratch) {
    let mut rng = Rng::stream(ctx.seed, STREAM_EPISODE, pidx, j);
    let site_idx = if rng.chance(0.85) {
        prof.home_site
    } else {
        ctx.site_index(&mut rng)
    };
    let site = &SITES[site_idx];
    let day = visit.day;
    let age = age_at(prof.birth, ctx.civil[day as usize]);
    let u = rng.unit();
    let age_missing = if u < 0.005 {
        1
    } else if u < 0.0085 {
        2
    } else if u < 0.01 {
        3
    } else {
        0
    };
    let cm = rng.chance(site.cm);
    let uncoded = rng.chance(0.003);
    sc.ep = Episode {
        patient: pidx,
        site: site_idx,
        day,
        age,
        age_missing,
        sex: prof.sex,
        died: visit.died,
        items: std::mem::take(&mut sc.ep.items),
    };
    sc.ep.items.clear();
    sc.units.clear();
    sc.chosen.clear();
    if uncoded {
        return;
    }
    let mut g = EpisodeGen {
        ctx,
        prof,
        pidx,
        rng,
        site,
        cm,
        age,
    };
    let band = match age {
        0..=44 => 0,
        45..=69 => 1,
        _ => 2,
    };
    let d = day as i32;
    let active = |c: usize| prof.onset[c] <= d;

    // Primary diagnosis: an acute event today, an exacerbation of a latent
    // condition, or an acute problem typical of the age.
    let mut primary_cond = None;
    let mut forced = None;
    let mut primary = None;
    for &e in &EVENTS {
        if prof.onset[e] == d && primary.is_none() {
            let code = {
                let t = g.tables(e);
                g.cond_code(t, e)
            };
            primary = Some(code);
            primary_cond = Some(e);
        }
    }
    if primary.is_none() {
        let admitting = || {
            prof.conditions()
                .filter(|&c| COND[c].kind == Kind::Chronic && active(c) && COND[c].admit > 0.0)
        };
        let wsum: f64 = admitting().map(|c| COND[c].admit).sum();
        if wsum > 0.0 && g.rng.chance((0.09 * wsum).min(0.6)) {
            let mut r = g.rng.unit() * wsum;
            let mut pick = None;
            for c in admitting() {
                pick = Some(c);
                r -= COND[c].admit;
                if r < 0.0 {
                    break;
                }
            }
            if let Some(c) = pick {
                primary_cond = Some(c);
                if c == CANCER && g.rng.chance(0.35) {
                    primary = Some(if cm { "Z51.11" } else { "Z51.1" });
                    forced = Some(c);
                    primary_cond = None;
                } else {
                    let code = {
                        let t = g.tables(c);
                        g.cond_code(t, c)
                    };
                    primary = Some(code);
                }
            }
        }
    }
    let primary = primary.unwrap_or_else(|| {
        let t = if cm {
            &ctx.acute_cm[band]
        } else {
            &ctx.acute[band]
        };
        t.pick_fit(&mut g.rng, prof.sex, age).unwrap_or("R69")
    });
    let mut first = g.unit(primary, Role::Primary);
    if primary.starts_with('S') && first.1 == EMPTY {
        let old = age >= 65;
        if g.rng.chance(if old { 0.85 } else { 0.5 }) {
            let t = match (old, cm) {
                (true, false) => &ctx.falls,
                (true, true) => &ctx.falls_cm,
                (false, false) => &ctx.ext_young,
                (false, true) => &ctx.ext_young_cm,
            };
            let code = t.pick(&mut g.rng);
            first.1 = make_item(&mut g.rng, site, code, Role::Primary);
        }
    }
    sc.chosen.push(first.0.code);
    if first.1 != EMPTY {
        sc.chosen.push(first.1.code);
    }
    sc.units.push(first);

    // Secondary diagnoses.
    let depth = site.depth;
    let push = |g: &mut EpisodeGen, sc: &mut Scratch, code: &'static str, role: Role| {
        if sc.chosen.contains(&code) {
            return;
        }
        let unit = g.unit(code, role);
        sc.chosen.push(unit.0.code);
        if unit.1 != EMPTY {
            sc.chosen.push(unit.1.code);
        }
        sc.units.push(unit);
    };
    for c in prof.conditions() {
        let def = &COND[c];
        if !active(c) || primary_cond == Some(c) {
            continue;
        }
        let since = d - prof.onset[c];
        match def.kind {
            Kind::Chronic => {
                let p = if forced == Some(c) {
                    1.0
                } else {
                    (def.code_p * depth).min(0.97)
                };
                if g.rng.chance(p) {
                    let code = {
                        let t = g.tables(c);
                        g.cond_code(t, c)
                    };
                    push(&mut g, sc, code, Role::Chronic);
                }
            }
            Kind::Event if since <= 28 => {
                if g.rng.chance(0.7) {
                    let code = {
                        let t = g.tables(c);
                        g.cond_code(t, c)
                    };
                    push(&mut g, sc, code, Role::Chronic);
                }
            }
            Kind::Event => {
                if g.rng.chance((def.code_p * depth).min(0.97)) {
                    let code = {
                        let t = g.hist_table(c);
                        g.cond_code(t, c)
                    };
                    push(&mut g, sc, code, Role::Chronic);
                }
            }
        }
    }
    let n_acute = g.rng.poisson(ctx.acute_rate[age as usize] * depth);
    let second = if cm {
        &ctx.second_cm[band]
    } else {
        &ctx.second[band]
    };
    for _ in 0..n_acute {
        if let Some(code) = second.pick_fit(&mut g.rng, prof.sex, age) {
            push(&mut g, sc, code, Role::Acute);
        }
    }
    let mut lambda = ctx.frail_rate[age as usize] * (0.55 * prof.frailty).exp();
    if active(DEMENTIA) {
        lambda += 0.8;
    }
    let n_frail = g.rng.poisson(lambda * depth);
    let frail = if cm { &ctx.frail_cm } else { &ctx.frail };
    for _ in 0..n_frail {
        if let Some(code) = frail.pick_fit(&mut g.rng, prof.sex, age) {
            push(&mut g, sc, code, Role::Frailty);
        }
    }

    // Secondary codes in no particular order, then the field limit.
    shuffle(&mut sc.units[1..], &mut g.rng);
    let items = &mut sc.ep.items;
    for &(a, b) in &sc.units {
        for it in [a, b] {
            if it != EMPTY && items.len() < ctx.fields {
                items.push(it);
            }
        }
    }
    // A few entries are not codes at all, and a few records have a blank field
    // between codes.
    for it in items.iter_mut() {
        if g.rng.chance(0.005) {
            *it = Item {
                code: ctx.junk.pick(&mut g.rng),
                poa: if site.poa { b'U' } else { 0 },
                style: RAW,
            };
        }
    }
    if items.len() >= 3 && g.rng.chance(0.002) {
        let at = 1 + g.rng.below(items.len() as u64 - 1) as usize;
        items.insert(at, EMPTY);
        items.truncate(ctx.fields);
    }
}

// ---------------------------------------------------------------------------
// Output.
// ---------------------------------------------------------------------------

fn put_u64(buf: &mut Vec<u8>, mut n: u64) {
    let mut tmp = [0u8; 20];
    let mut i = tmp.len();
    loop {
        i -= 1;
        tmp[i] = b'0' + (n % 10) as u8;
        n /= 10;
        if n == 0 {
            break;
        }
    }
    buf.extend_from_slice(&tmp[i..]);
}

fn put_id(buf: &mut Vec<u8>, prefix: u8, n: u64, width: usize) {
    buf.push(prefix);
    for _ in digits(n)..width {
        buf.push(b'0');
    }
    put_u64(buf, n);
}

fn split_mark(code: &str) -> (&str, &str) {
    if let Some(base) = code.strip_suffix('†') {
        (base, "†")
    } else if let Some(base) = code.strip_suffix('*') {
        (base, "*")
    } else {
        (code, "")
    }
}

fn put_code(buf: &mut Vec<u8>, it: &Item) {
    if it.style & RAW != 0 {
        buf.extend_from_slice(it.code.as_bytes());
        return;
    }
    let (base, mark) = split_mark(it.code);
    let lower = it.style & LOWER != 0;
    let mut n = 0;
    for &c in base.as_bytes() {
        if c == b'.' {
            if it.style & DOT != 0 {
                buf.push(b'.');
            }
            continue;
        }
        buf.push(if lower { c.to_ascii_lowercase() } else { c });
        n += 1;
    }
    if n == 3 && it.style & FILLER != 0 {
        buf.push(if lower { b'x' } else { b'X' });
    }
    if it.style & MARK != 0 {
        buf.extend_from_slice(mark.as_bytes());
    }
}

fn put_age(buf: &mut Vec<u8>, ep: &Episode) {
    match ep.age_missing {
        0 => put_u64(buf, u64::from(ep.age)),
        1 => {}
        2 => buf.extend_from_slice(b"NA"),
        _ => buf.extend_from_slice(b"N/K"),
    }
}

fn header(ctx: &Ctx) -> Vec<u8> {
    let mut h = Vec::new();
    if ctx.long {
        h.extend_from_slice(
            b"episode_id,patient_id,admission_date,age,position,code,present_on_admission,died_within_30_days",
        );
    } else {
        h.extend_from_slice(b"episode_id,patient_id,site,admission_date,age,sex");
        for i in 1..=ctx.fields {
            h.extend_from_slice(b",dx");
            put_u64(&mut h, i as u64);
        }
        h.extend_from_slice(b",died_within_30_days");
        if ctx.wards > 0 {
            h.extend_from_slice(b",ward");
        }
    }
    h.push(b'\n');
    h
}

fn put_wide(buf: &mut Vec<u8>, ctx: &Ctx, id: u64, ep: &Episode) {
    put_id(buf, b'E', id, ctx.episode_width);
    buf.push(b',');
    put_id(buf, b'P', ep.patient + 1, ctx.patient_width);
    buf.push(b',');
    buf.extend_from_slice(SITES[ep.site].code.as_bytes());
    buf.push(b',');
    buf.extend_from_slice(&ctx.dates[ep.day as usize]);
    buf.push(b',');
    put_age(buf, ep);
    buf.push(b',');
    buf.push(ep.sex);
    for i in 0..ctx.fields {
        buf.push(b',');
        if let Some(it) = ep.items.get(i) {
            put_code(buf, it);
        }
    }
    buf.push(b',');
    buf.push(if ep.died { b'1' } else { b'0' });
    if ctx.wards > 0 {
        // SplitMix64 of the seed and episode number: no draw from the
        // generator's streams, so the other columns do not change.
        let mut z = ctx.seed ^ id.wrapping_mul(0x9E37_79B9_7F4A_7C15);
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^= z >> 31;
        buf.push(b',');
        buf.extend_from_slice(SITES[ep.site].code.as_bytes());
        buf.push(b'-');
        put_u64(buf, 1 + z % ctx.wards);
    }
    buf.push(b'\n');
}

/// One long row; `pos` is 1-based and `it` may be empty (an uncoded episode).
fn put_long(buf: &mut Vec<u8>, ctx: &Ctx, id: u64, ep: &Episode, pos: usize, it: &Item) {
    put_id(buf, b'E', id, ctx.episode_width);
    buf.push(b',');
    put_id(buf, b'P', ep.patient + 1, ctx.patient_width);
    buf.push(b',');
    buf.extend_from_slice(&ctx.dates[ep.day as usize]);
    buf.push(b',');
    put_age(buf, ep);
    buf.push(b',');
    put_u64(buf, pos as u64);
    buf.push(b',');
    put_code(buf, it);
    buf.push(b',');
    if it.poa != 0 {
        buf.push(it.poa);
    }
    buf.push(b',');
    buf.push(if ep.died { b'1' } else { b'0' });
    buf.push(b'\n');
}

/// The long rows of an episode, as 1-based positions (an uncoded episode has
/// one row at position 1).
fn long_positions(ep: &Episode) -> impl Iterator<Item = usize> + '_ {
    let coded = ep.items.iter().any(|it| it != &EMPTY);
    ep.items
        .iter()
        .enumerate()
        .filter(|(_, it)| *it != &EMPTY)
        .map(|(i, _)| i + 1)
        .chain((!coded).then_some(1))
}

fn build_episode(ctx: &Ctx, plan: &Plan, idx: usize, sc: &mut Scratch) {
    let key = plan.keys[idx];
    let pidx = key.patient();
    let prof = Profile::from_store(&plan.store, pidx);
    gen_episode(ctx, &prof, pidx, key.visit_number(), key.visit(), sc);
}

/// What the output is made of, in file order.
enum Order {
    /// Episodes in date order.
    Sorted(usize),
    /// Episodes in shuffled order (indices into the plan).
    Episodes(Vec<u32>),
    /// Long rows in shuffled order: episode index << 8 | position.
    Rows(Vec<u64>),
}

impl Order {
    fn len(&self) -> usize {
        match self {
            Order::Sorted(n) => *n,
            Order::Episodes(v) => v.len(),
            Order::Rows(v) => v.len(),
        }
    }
}

#[derive(Default, Clone, Copy)]
struct Counts {
    rows: u64,
    codes: u64,
    invalid: u64,
}

impl Counts {
    fn add(&mut self, o: Counts) {
        self.rows += o.rows;
        self.codes += o.codes;
        self.invalid += o.invalid;
    }
}

/// Episodes whose patient records are read ahead together.
const TOUCH: usize = 32;

/// Reads the patient records of some episodes ahead of use. The episodes are
/// in date order, so their patients are scattered over the store; independent
/// reads in a row overlap their cache misses instead of stalling one by one.
fn touch(plan: &Plan, episodes: impl Iterator<Item = usize> + Clone) {
    let patients = &plan.store.patients;
    for idx in episodes.clone() {
        std::hint::black_box(patients[plan.keys[idx].patient() as usize].first);
    }
    for idx in episodes {
        let first = patients[plan.keys[idx].patient() as usize].first;
        std::hint::black_box(plan.store.conds.get(first as usize));
    }
}

fn render(
    ctx: &Ctx,
    plan: &Plan,
    order: &Order,
    range: std::ops::Range<usize>,
    sc: &mut Scratch,
    buf: &mut Vec<u8>,
) -> Counts {
    buf.clear();
    let mut counts = Counts::default();
    let item = |k: usize| match order {
        Order::Sorted(_) => (k, None),
        Order::Episodes(v) => (v[k] as usize, None),
        Order::Rows(v) => ((v[k] >> 8) as usize, Some((v[k] & 0xFF) as usize)),
    };
    let end = range.end;
    for k in range {
        if k % TOUCH == 0 {
            touch(plan, (k..end.min(k + TOUCH)).map(|k| item(k).0));
        }
        let (idx, pos) = item(k);
        build_episode(ctx, plan, idx, sc);
        let ep = &sc.ep;
        let id = idx as u64 + 1;
        match pos {
            Some(pos) => {
                let it = ep.items.get(pos - 1).copied().unwrap_or(EMPTY);
                put_long(buf, ctx, id, ep, pos, &it);
                counts.rows += 1;
            }
            None => {
                for it in &ep.items {
                    if *it != EMPTY {
                        counts.codes += 1;
                        counts.invalid += u64::from(it.style & RAW != 0);
                    }
                }
                if ctx.long {
                    for pos in long_positions(ep) {
                        let it = ep.items.get(pos - 1).copied().unwrap_or(EMPTY);
                        put_long(buf, ctx, id, ep, pos, &it);
                        counts.rows += 1;
                    }
                } else {
                    put_wide(buf, ctx, id, ep);
                    counts.rows += 1;
                }
            }
        }
    }
    counts
}

fn shuffle<T>(v: &mut [T], rng: &mut Rng) {
    for i in (1..v.len()).rev() {
        let k = rng.below(i as u64 + 1) as usize;
        v.swap(i, k);
    }
}

const CHUNK: usize = 8192;

/// Runs `work` over `0..n` in chunks on `threads` threads, handing each chunk's
/// result to `sink` in order.
fn in_chunks<R: Send>(
    n: usize,
    threads: usize,
    work: impl Fn(std::ops::Range<usize>, &mut Scratch) -> R + Sync,
    mut sink: impl FnMut(R) -> io::Result<()>,
) -> io::Result<()> {
    let mut scratch: Vec<Scratch> = (0..threads).map(|_| Scratch::default()).collect();
    let mut start = 0;
    while start < n {
        let ranges: Vec<_> = (0..threads)
            .map(|t| (start + t * CHUNK).min(n)..(start + (t + 1) * CHUNK).min(n))
            .filter(|r| !r.is_empty())
            .collect();
        start = ranges.last().map_or(n, |r| r.end);
        let work = &work;
        let results: Vec<R> = std::thread::scope(|s| {
            let handles: Vec<_> = ranges
                .into_iter()
                .zip(scratch.iter_mut())
                .map(|(r, sc)| s.spawn(move || work(r, sc)))
                .collect();
            handles
                .into_iter()
                .map(|h| h.join().expect("worker thread panicked"))
                .collect()
        });
        for r in results {
            sink(r)?;
        }
    }
    Ok(())
}

fn run(cfg: &Config) -> Result<(), String> {
    let t0 = Instant::now();
    let ctx = Ctx::new(cfg);
    let plan = plan(&ctx, cfg)?;
    let t_plan = t0.elapsed().as_secs_f64();
    let n = plan.keys.len();
    let threads = cfg.threads.max(1);

    let order = if !cfg.shuffle {
        Order::Sorted(n)
    } else {
        let mut rng = Rng::stream(cfg.seed, STREAM_SHUFFLE, 0, 0);
        if cfg.long {
            let mut rows = Vec::new();
            in_chunks(
                n,
                threads,
                |r, sc| {
                    let mut v = Vec::new();
                    for idx in r {
                        build_episode(&ctx, &plan, idx, sc);
                        v.extend(long_positions(&sc.ep).map(|p| ((idx as u64) << 8) | p as u64));
                    }
                    v
                },
                |v| {
                    rows.extend(v);
                    Ok(())
                },
            )
            .map_err(|e| e.to_string())?;
            shuffle(&mut rows, &mut rng);
            Order::Rows(rows)
        } else {
            let mut v: Vec<u32> = (0..n as u32).collect();
            shuffle(&mut v, &mut rng);
            Order::Episodes(v)
        }
    };

    let sink: Box<dyn Write> = match &cfg.output {
        Some(path) => {
            Box::new(File::create(path).map_err(|e| format!("cannot create {path}: {e}"))?)
        }
        None => Box::new(io::stdout().lock()),
    };
    let mut out = BufWriter::with_capacity(1 << 20, sink);
    let mut total = Counts::default();
    let mut bufs: Vec<Vec<u8>> = Vec::new();
    let result = out.write_all(&header(&ctx)).and_then(|()| {
        in_chunks(
            order.len(),
            threads,
            |r, sc| {
                let mut buf = Vec::with_capacity(r.len() * 160);
                let c = render(&ctx, &plan, &order, r, sc, &mut buf);
                (buf, c)
            },
            |(buf, c)| {
                total.add(c);
                out.write_all(&buf)?;
                bufs.push(buf);
                bufs.clear();
                Ok(())
            },
        )?;
        out.flush()
    });
    match result {
        Err(e) if e.kind() == io::ErrorKind::BrokenPipe => return Ok(()),
        Err(e) => return Err(format!("write failed: {e}")),
        Ok(()) => {}
    }
    if !cfg.quiet {
        let secs = t0.elapsed().as_secs_f64();
        let mut msg = format!(
            "synth: {} episodes of {} patients, {} rows, {:.1}% died within 30 days",
            n,
            cfg.patients,
            total.rows,
            100.0 * plan.deaths as f64 / n as f64
        );
        if !matches!(order, Order::Rows(_)) {
            msg += &format!(
                ", {:.2} codes per episode ({:.2}% invalid)",
                total.codes as f64 / n as f64,
                100.0 * total.invalid as f64 / total.codes.max(1) as f64
            );
        }
        msg += &format!("; {secs:.2} s (planning {t_plan:.2} s)");
        eprintln!("{msg}");
    }
    Ok(())
}

// ---------------------------------------------------------------------------
// Command line.
// ---------------------------------------------------------------------------

/// What the command line asks for.
enum Action {
    Help,
    ListConditions,
    Generate(Config),
}

/// The latent condition model as a table, for documentation and analysis.
fn list_conditions() -> String {
    let mut t = String::from(
        "condition\tkind\tlogit_at_70\tper_decade\tmale\tmorbidity\tfrailty\trequires\t\
         coded_per_episode\tdeath_log_odds\tdeath_log_odds_later\n",
    );
    for c in &COND {
        let kind = match c.kind {
            Kind::Chronic => "chronic",
            Kind::Event => "event",
        };
        let later = match c.kind {
            Kind::Chronic => String::new(),
            Kind::Event => c.death_hist.to_string(),
        };
        t += &format!(
            "{}\t{kind}\t{}\t{}\t{}\t{}\t{}\t{}\t{}\t{}\t{later}\n",
            c.name,
            c.base,
            c.age,
            c.male,
            c.morb,
            c.frail,
            c.requires.map_or("", |r| COND[r].name),
            c.code_p,
            c.death,
        );
    }
    t += "# logit_at_70: log-odds of the condition at age 70 (events: of an event during the window \
          or the five years before it), plus per_decade * (age - 70) / 10, male, and loadings on two \
          latent standard-normal scores (morbidity, frailty)\n";
    for &(from, to, b) in DEPS {
        t += &format!(
            "# {} adds {b} to the log-odds of {}\n",
            COND[from].name, COND[to].name
        );
    }
    t += &format!(
        "# 30-day death: logit = {DEATH_BASE} + {DEATH_AGE} * (age - 70) + {DEATH_FRAIL} * frailty \
         + the death_log_odds of the active conditions (events: death_log_odds for 30 days after \
         onset, then death_log_odds_later)\n"
    );
    t
}

fn parse_args(args: &[String]) -> Result<Action, String> {
    let mut episodes = 10_000u64;
    let mut patients = None;
    let mut cfg = Config {
        episodes: 0,
        patients: 0,
        fields: 20,
        long: false,
        seed: 1,
        start: days_from_civil(2022, 1, 1),
        days: 1095,
        shuffle: false,
        threads: std::thread::available_parallelism().map_or(1, |n| n.get().min(16)),
        output: None,
        quiet: false,
        wards: 0,
    };
    let mut i = 0;
    while i < args.len() {
        let arg = args[i].as_str();
        i += 1;
        let (name, inline) = match arg.split_once('=') {
            Some((n, v)) if n.starts_with("--") => (n, Some(v.to_string())),
            _ => (arg, None),
        };
        let mut value = || -> Result<String, String> {
            if let Some(v) = &inline {
                return Ok(v.clone());
            }
            let v = args
                .get(i)
                .cloned()
                .ok_or(format!("{name} needs a value"))?;
            i += 1;
            Ok(v)
        };
        fn num<T: std::str::FromStr>(name: &str, v: &str) -> Result<T, String> {
            v.trim()
                .replace('_', "")
                .parse()
                .map_err(|_| format!("{name}: not a valid number: {v}"))
        }
        match name {
            "-h" | "--help" => return Ok(Action::Help),
            "--list-conditions" => return Ok(Action::ListConditions),
            "--episodes" => episodes = num(name, &value()?)?,
            "--patients" => patients = Some(num(name, &value()?)?),
            "--fields" => cfg.fields = num(name, &value()?)?,
            "--seed" => cfg.seed = num(name, &value()?)?,
            "--days" => cfg.days = num(name, &value()?)?,
            "--threads" => cfg.threads = num(name, &value()?)?,
            "--start" => {
                let v = value()?;
                cfg.start =
                    parse_date(&v).ok_or(format!("--start: not a date (YYYY-MM-DD): {v}"))?;
            }
            "--layout" => {
                cfg.long = match value()?.as_str() {
                    "wide" => false,
                    "long" => true,
                    other => return Err(format!("--layout must be wide or long, not {other}")),
                }
            }
            "-o" | "--output" => cfg.output = Some(value()?),
            "--shuffle" => cfg.shuffle = true,
            "--wards-per-site" => cfg.wards = num(name, &value()?)?,
            "-q" | "--quiet" => cfg.quiet = true,
            other => return Err(format!("unknown argument: {other} (see --help)")),
        }
    }
    let patients = patients.unwrap_or((episodes * 3 / 8).max(1));
    if episodes == 0 || episodes > u64::from(u32::MAX) {
        return Err("--episodes must be between 1 and 4294967295".into());
    }
    if patients == 0 || patients > episodes {
        return Err(format!(
            "--patients must be between 1 and the number of episodes ({episodes})"
        ));
    }
    if patients > MAX_PATIENTS {
        return Err(format!("--patients must be at most {MAX_PATIENTS}"));
    }
    if episodes > patients * 50 {
        return Err("at most 50 episodes per patient on average".into());
    }
    if !(1..=MAX_FIELDS).contains(&cfg.fields) {
        return Err(format!("--fields must be between 1 and {MAX_FIELDS}"));
    }
    if !(1..=MAX_DAYS).contains(&cfg.days) {
        return Err(format!("--days must be between 1 and {MAX_DAYS}"));
    }
    let last = civil_from_days(cfg.start + i64::from(cfg.days + MAX_DELAY));
    let first = civil_from_days(cfg.start);
    if first.0 < 1900 || last.0 > 9999 {
        return Err("--start must lie between 1900 and 9999".into());
    }
    if cfg.threads == 0 {
        return Err("--threads must be at least 1".into());
    }
    cfg.episodes = episodes;
    cfg.patients = patients;
    Ok(Action::Generate(cfg))
}

fn main() -> ExitCode {
    let args: Vec<String> = std::env::args().skip(1).collect();
    match parse_args(&args) {
        Ok(Action::Help) => {
            print!("{HELP}");
            ExitCode::SUCCESS
        }
        Ok(Action::ListConditions) => {
            print!("{}", list_conditions());
            ExitCode::SUCCESS
        }
        Ok(Action::Generate(cfg)) => match run(&cfg) {
            Ok(()) => ExitCode::SUCCESS,
            Err(e) => {
                eprintln!("synth: {e}");
                ExitCode::FAILURE
            }
        },
        Err(e) => {
            eprintln!("synth: {e}");
            ExitCode::from(2)
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn config(episodes: u64, patients: u64, long: bool, shuffle: bool) -> Config {
        let args: Vec<String> = [
            "--episodes".to_string(),
            episodes.to_string(),
            "--patients".to_string(),
            patients.to_string(),
            "--seed".to_string(),
            "42".to_string(),
        ]
        .into_iter()
        .collect();
        let Ok(Action::Generate(mut cfg)) = parse_args(&args) else {
            panic!("valid arguments")
        };
        cfg.long = long;
        cfg.shuffle = shuffle;
        cfg
    }

    #[test]
    fn dates_round_trip() {
        for z in -800_000..800_000i64 {
            let (y, m, d) = civil_from_days(z);
            assert_eq!(days_from_civil(i64::from(y), m, d), z);
        }
        assert_eq!(parse_date("2022-01-01"), Some(days_from_civil(2022, 1, 1)));
        assert_eq!(parse_date("2023-02-29"), None);
        assert_eq!(parse_date("2024-02-29"), Some(days_from_civil(2024, 2, 29)));
        assert_eq!(age_at((1950, 6, 15), (2022, 6, 14)), 71);
        assert_eq!(age_at((1950, 6, 15), (2022, 6, 15)), 72);
    }

    #[test]
    fn condition_indices_and_dependencies_are_consistent() {
        let names = [
            (OBESITY, "obesity"),
            (HTN, "hypertension"),
            (T2DM, "diabetes_t2"),
            (CKD, "ckd"),
            (HF, "heart_failure"),
            (MI, "mi"),
            (STROKE, "stroke"),
            (DEMENTIA, "dementia"),
            (CANCER, "cancer"),
            (METS, "metastatic"),
            (LIVER_SEVERE, "liver_severe"),
            (ANAEMIA, "anaemia"),
            (HIPFRACTURE, "hip_fracture"),
        ];
        for (i, name) in names {
            assert_eq!(COND[i].name, name);
        }
        for &(from, to, _) in DEPS {
            assert!(
                from < to,
                "{} must precede {}",
                COND[from].name,
                COND[to].name
            );
        }
        for (i, c) in COND.iter().enumerate() {
            if let Some(r) = c.requires {
                assert!(r < i);
            }
            assert_eq!(c.kind == Kind::Event, EVENTS.contains(&i));
            assert!(!c.who.is_empty() && !c.cm.is_empty());
        }
    }

    #[test]
    fn catalogue_codes_are_well_formed() {
        let mut all: Vec<&str> = Vec::new();
        for c in &COND {
            for t in [c.who, c.cm, c.hist_who, c.hist_cm] {
                all.extend(entries(t).map(|e| e.0));
            }
        }
        for t in [ACUTE_WHO, ACUTE_CM, SECONDARY_WHO, SECONDARY_CM] {
            for (code, w) in entries(t) {
                assert!(
                    w.iter().all(|&x| x >= 0.0) && w.iter().sum::<f64>() > 0.0,
                    "{code}"
                );
                all.push(code);
            }
        }
        for t in [
            FRAIL_WHO,
            FRAIL_CM,
            FALLS_WHO,
            FALLS_CM,
            EXTERNAL_YOUNG_WHO,
            EXTERNAL_YOUNG_CM,
        ] {
            for (code, w) in entries(t) {
                assert!(w[0] > 0.0, "{code}");
                all.push(code);
            }
        }
        for code in all {
            let (base, _) = split_mark(code);
            let b = base.as_bytes();
            assert!(b[0].is_ascii_uppercase(), "{code}");
            assert!(b[1].is_ascii_digit(), "{code}");
            assert!(b.len() == 3 || b[3] == b'.', "{code}");
            let plain: Vec<u8> = b.iter().copied().filter(|&c| c != b'.').collect();
            assert!((3..=7).contains(&plain.len()), "{code}");
            assert!(
                plain
                    .iter()
                    .all(|c| c.is_ascii_uppercase() || c.is_ascii_digit()),
                "{code}"
            );
        }
    }

    #[test]
    fn code_styles() {
        let render = |code: &'static str, style: u8| {
            let mut b = Vec::new();
            put_code(
                &mut b,
                &Item {
                    code,
                    poa: 0,
                    style,
                },
            );
            String::from_utf8(b).unwrap()
        };
        assert_eq!(render("I50.9", DOT), "I50.9");
        assert_eq!(render("I50.9", 0), "I509");
        assert_eq!(render("I10", FILLER), "I10X");
        assert_eq!(render("I10", FILLER | LOWER), "i10x");
        assert_eq!(render("E11.4†", DOT | MARK), "E11.4†");
        assert_eq!(render("E11.4†", DOT), "E11.4");
        assert_eq!(render("S72.001A", 0), "S72001A");
        assert_eq!(render("I5O.9", RAW), "I5O.9");
    }

    fn episodes(cfg: &Config) -> Vec<(u64, u64, u32, bool, Vec<String>)> {
        let ctx = Ctx::new(cfg);
        let plan = plan(&ctx, cfg).unwrap();
        let mut sc = Scratch::default();
        (0..plan.keys.len())
            .map(|idx| {
                build_episode(&ctx, &plan, idx, &mut sc);
                let ep = &sc.ep;
                let codes = ep
                    .items
                    .iter()
                    .map(|it| {
                        let mut b = Vec::new();
                        put_code(&mut b, it);
                        String::from_utf8(b).unwrap()
                    })
                    .collect();
                (idx as u64, ep.patient, ep.day, ep.died, codes)
            })
            .collect()
    }

    #[test]
    fn plan_is_exact_and_deterministic() {
        let cfg = config(5000, 1800, false, false);
        let ctx = Ctx::new(&cfg);
        let a = plan(&ctx, &cfg).unwrap();
        let b = plan(&ctx, &cfg).unwrap();
        assert_eq!(a.keys.len(), 5000);
        assert_eq!(a.keys, b.keys);
        let mut seen = vec![false; 1800];
        for k in &a.keys {
            seen[k.patient() as usize] = true;
        }
        assert!(seen.iter().all(|&s| s), "every patient has an episode");
        assert_eq!(episodes(&cfg), episodes(&config(5000, 1800, true, false)));
    }

    #[test]
    fn deaths_end_a_patients_admissions() {
        let cfg = config(4000, 1500, false, false);
        let eps = episodes(&cfg);
        let mut by_patient: std::collections::HashMap<u64, Vec<(u32, bool)>> = Default::default();
        for (_, p, day, died, _) in &eps {
            by_patient.entry(*p).or_default().push((*day, *died));
        }
        for visits in by_patient.values_mut() {
            visits.sort();
            let first_death = visits.iter().position(|v| v.1);
            if let Some(f) = first_death {
                // Every later admission is within 30 days of the flagged one
                // and flagged too.
                for v in &visits[f..] {
                    assert!(v.1 && v.0 < visits[f].0 + 30);
                }
            }
        }
    }
}

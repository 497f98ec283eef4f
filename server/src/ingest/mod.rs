//! Ingest: bytes → a validated [`CorrelationMap`] with line-numbered problems.
//!
//! Owns the accepted file formats (CSV long and wide, NPY, NPZ, JSON), their
//! tolerant column names and every check a file must pass. Knows no file
//! system, database or HTTP: callers hand in bytes and get back either a map
//! or every problem found. A file with any problem is rejected whole.
//!
//! Conventions shared by all formats:
//! - The map is C(x,t) = C_{j+x,j}(t), the infinite-temperature correlation
//!   2^-N Tr[σ^z_{j+x}(t) σ^z_j(0)], on integer site offsets x and times t ≥ 0,
//!   stored `[time, site]` (times × sites).
//! - The grid is the sorted union of the distinct offsets and the distinct
//!   times that occur. Grid points the file does not give are missing: they
//!   are masked out, never filled, and counted in [`Ingested::notes`].
//! - Times are compared exactly as parsed binary64 numbers: 0.1 and
//!   0.1000000000001 are two distinct times (a note points such near-equal
//!   pairs out, because they usually mean a rounding problem upstream).
//! - Problems carry the 1-based file line for text formats (the header is
//!   line 1 when it is the first line; comment and blank lines count) and name
//!   the JSON path or the NPZ array and index otherwise. At most
//!   [`MAX_PROBLEMS`] are listed; the last one then says how many more exist.
//! - No input, however malformed, makes the parsers panic or allocate more
//!   than a small multiple of its own size (grids are capped at
//!   [`MAX_GRID_POINTS`] cells).

pub mod couplings;
mod csv;
mod grid;
mod hdf5;
mod json;
mod npy;
pub mod shots;

use spreadscope_physics::CorrelationMap;

use crate::dataset::DatasetMeta;

pub use grid::MAX_GRID_POINTS;

/// The most problems one rejection lists; beyond it the last entry says how
/// many more were found, so a wholly wrong file does not produce a huge reply.
pub const MAX_PROBLEMS: usize = 100;

/// The formats a correlation map may arrive in.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Format {
    Csv,
    Npy,
    Npz,
    Json,
    /// HDF5 with datasets `C`, `t`, `x` and optional `err` at the root.
    Hdf5,
}

impl std::str::FromStr for Format {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        match s.to_ascii_lowercase().as_str() {
            "csv" | "tsv" | "txt" => Ok(Self::Csv),
            "npy" => Ok(Self::Npy),
            "npz" => Ok(Self::Npz),
            "json" => Ok(Self::Json),
            "h5" | "hdf5" | "hdf" => Ok(Self::Hdf5),
            other => Err(format!(
                "unknown format `{other}` (expected csv, npy, npz, json or h5)"
            )),
        }
    }
}

impl Format {
    /// Guesses the format from a file name's extension.
    #[must_use]
    pub fn from_file_name(name: &str) -> Option<Self> {
        name.rsplit_once('.').and_then(|(_, ext)| ext.parse().ok())
    }

    fn label(self) -> &'static str {
        match self {
            Self::Csv => "CSV",
            Self::Npy => "NPY",
            Self::Npz => "NPZ",
            Self::Json => "JSON",
            Self::Hdf5 => "HDF5",
        }
    }
}

/// The signature of a zip local file header (PKWARE APPNOTE.TXT 4.3.7), which
/// opens every `.npz` archive written by NumPy.
const ZIP_MAGIC: &[u8] = b"PK\x03\x04";
/// The UTF-8 byte order mark some spreadsheet programs write.
const BOM: &[u8] = b"\xEF\xBB\xBF";

/// Guesses the format from the content: NPY by its magic string, NPZ by the
/// zip signature, JSON by a leading `{` (after an optional byte order mark
/// and white space), CSV otherwise. `None` for empty or blank input, which
/// no format accepts.
#[must_use]
pub fn sniff(bytes: &[u8]) -> Option<Format> {
    if bytes.starts_with(npy::NPY_MAGIC) {
        return Some(Format::Npy);
    }
    if bytes.starts_with(ZIP_MAGIC) {
        return Some(Format::Npz);
    }
    if bytes.starts_with(hdf5::HDF5_MAGIC) {
        return Some(Format::Hdf5);
    }
    let text = bytes.strip_prefix(BOM).unwrap_or(bytes);
    let first = text.iter().find(|b| !b.is_ascii_whitespace())?;
    Some(if *first == b'{' {
        Format::Json
    } else {
        Format::Csv
    })
}

/// One thing wrong with an input: the 1-based line of a text file (header =
/// line 1) when there is one, and a sentence saying what is wrong.
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize)]
pub struct Problem {
    pub line: Option<usize>,
    pub reason: String,
}

/// Every problem found in a rejected input.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("{}", summary(.problems))]
pub struct IngestError {
    pub problems: Vec<Problem>,
}

fn summary(problems: &[Problem]) -> String {
    match problems.first() {
        None => "rejected".into(),
        Some(p) => {
            let place = p.line.map_or(String::new(), |l| format!("line {l}: "));
            if problems.len() == 1 {
                format!("{place}{}", p.reason)
            } else {
                format!(
                    "{place}{} (and {} more problems)",
                    p.reason,
                    problems.len() - 1
                )
            }
        }
    }
}

/// Options that some formats need: the axes of a bare NPY array.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct IngestOptions {
    pub x: Option<Vec<i32>>,
    pub t: Option<Vec<f64>>,
}

/// A successfully parsed map with whatever metadata the file carried.
#[derive(Debug, Clone)]
pub struct Ingested {
    pub map: CorrelationMap,
    pub meta: DatasetMeta,
    /// Facts worth telling the person (e.g. "4 grid points missing").
    pub notes: Vec<String>,
}

/// Parses `bytes` in `format` into a validated map.
///
/// `options` supplies the axes of a bare NPY array; for the other formats,
/// which carry their own axes, given options are ignored with a note.
///
/// # Errors
/// Every problem found (at most [`MAX_PROBLEMS`]), each with its line where
/// the format has lines.
pub fn parse(
    bytes: &[u8],
    format: Format,
    options: &IngestOptions,
) -> Result<Ingested, IngestError> {
    // A binary file sent under another format would otherwise produce a
    // wall of UTF-8 or archive problems; one sentence naming the mix-up
    // helps more. Text without a binary magic string sent as NPY or NPZ is
    // left to those parsers, which say the magic string is missing.
    if let Some(found @ (Format::Npy | Format::Npz | Format::Hdf5)) =
        sniff(bytes).filter(|&f| f != format)
    {
        return Err(IngestError {
            problems: vec![Problem {
                line: None,
                reason: format!(
                    "the content is an {} file but format {} was requested",
                    found.label(),
                    format.label()
                ),
            }],
        });
    }
    let mut ingested = match format {
        Format::Csv => csv::parse(bytes)?,
        Format::Json => json::parse(bytes)?,
        Format::Npz => npy::parse_npz(bytes)?,
        Format::Npy => npy::parse_npy(bytes, options)?,
        // The HDF5 reader needs an owned buffer: one copy of the upload.
        Format::Hdf5 => hdf5::parse_hdf5_map(bytes.to_vec())?,
    };
    if format != Format::Npy && (options.x.is_some() || options.t.is_some()) {
        ingested.notes.push(format!(
            "the x/t request parameters were ignored: a {} file carries its own axes",
            format.label()
        ));
    }
    Ok(ingested)
}

/// The meaning of a column (CSV), key (JSON) or array (NPZ).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Role {
    Offset,
    Time,
    Value,
    Error,
}

impl Role {
    /// The canonical name used in messages.
    fn name(self) -> &'static str {
        match self {
            Self::Offset => "x",
            Self::Time => "t",
            Self::Value => "C",
            Self::Error => "err",
        }
    }

    /// Accepted names, for messages about a missing column.
    fn aliases(self) -> &'static str {
        match self {
            Self::Offset => "x, site, r, offset, dx, distance",
            Self::Time => "t, time, times",
            Self::Value => "C, value, corr, correlation, Czz",
            Self::Error => "err, error, sigma, stderr, std, dC",
        }
    }

    /// The role of a column name: case-insensitive, surrounding white space
    /// ignored.
    fn of(name: &str) -> Option<Self> {
        match name.trim().to_lowercase().as_str() {
            "x" | "site" | "r" | "offset" | "dx" | "distance" => Some(Self::Offset),
            "t" | "time" | "times" => Some(Self::Time),
            "c" | "value" | "corr" | "correlation" | "czz" => Some(Self::Value),
            "err" | "error" | "sigma" | "stderr" | "std" | "dc" => Some(Self::Error),
            _ => None,
        }
    }
}

/// Collects problems in the order found, keeping at most [`MAX_PROBLEMS`]
/// (memory stays bounded on a wholly wrong file) while counting all.
#[derive(Debug, Default)]
struct Problems {
    list: Vec<Problem>,
    total: usize,
}

impl Problems {
    fn at(&mut self, line: usize, reason: impl Into<String>) {
        self.push(Some(line), reason.into());
    }

    fn general(&mut self, reason: impl Into<String>) {
        self.push(None, reason.into());
    }

    fn push(&mut self, line: Option<usize>, reason: String) {
        self.lazy(line, || reason);
    }

    /// Records a problem, building its sentence only if it will be listed:
    /// array formats may hold millions of bad cells.
    fn lazy(&mut self, line: Option<usize>, reason: impl FnOnce() -> String) {
        self.total += 1;
        if self.list.len() < MAX_PROBLEMS {
            self.list.push(Problem {
                line,
                reason: reason(),
            });
        }
    }

    fn is_empty(&self) -> bool {
        self.total == 0
    }

    /// The rejection: the problems in order, the last replaced by a count of
    /// the rest when there were more than [`MAX_PROBLEMS`].
    fn into_error(mut self) -> IngestError {
        if self.total > MAX_PROBLEMS {
            let kept = MAX_PROBLEMS - 1;
            self.list.truncate(kept);
            self.list.push(Problem {
                line: None,
                reason: format!("…and {} more problems", self.total - kept),
            });
        }
        IngestError {
            problems: self.list,
        }
    }

    /// `Err` with every problem when there is any, `Ok(())` otherwise.
    fn check(self) -> Result<(), IngestError> {
        if self.is_empty() {
            Ok(())
        } else {
            Err(self.into_error())
        }
    }
}

/// The name of the field a [`DatasetMeta::validate`] message blames: the text
/// between its first pair of backticks.
fn blamed_field(message: &str) -> Option<&str> {
    let (_, rest) = message.split_once('`')?;
    rest.split_once('`').map(|(field, _)| field)
}

/// Helpers shared by the format tests.
/// Parses a time axis written as `1,2,5`, `T0:T1:COUNT` (linear) or
/// `T0:T1:COUNT:log`, shared by the command line and the upload of bare
/// NPY arrays. Times are finite, ≥ 0 and strictly increasing.
///
/// # Errors
/// A sentence starting with `place` (the option or parameter) and the text.
pub fn parse_time_spec(spec: &str, place: &str) -> Result<Vec<f64>, String> {
    let bad = |what: &str| format!("{place} `{spec}`: {what}");
    let number = |s: &str| -> Result<f64, String> {
        let v: f64 = s
            .trim()
            .parse()
            .map_err(|_| bad(&format!("`{s}` is not a number")))?;
        if v.is_finite() && v >= 0.0 {
            Ok(v)
        } else {
            Err(bad(&format!("`{s}` is not a finite time ≥ 0")))
        }
    };
    let parts: Vec<&str> = spec.split(':').collect();
    let times = match parts.as_slice() {
        [single] => single
            .split(',')
            .map(number)
            .collect::<Result<Vec<_>, _>>()?,
        [a, b, n] | [a, b, n, _] => {
            let (a, b) = (number(a)?, number(b)?);
            let n: usize = n
                .trim()
                .parse()
                .map_err(|_| bad(&format!("count `{n}` is not a whole number")))?;
            if !(2..=100_000).contains(&n) {
                return Err(bad("count must be between 2 and 100000"));
            }
            let log = match parts.get(3) {
                None => false,
                Some(&"log") => true,
                Some(other) => return Err(bad(&format!("unknown spacing `{other}` (use `log`)"))),
            };
            if log && a <= 0.0 {
                return Err(bad("log spacing needs T0 > 0"));
            }
            (0..n)
                .map(|i| {
                    let f = i as f64 / (n - 1) as f64;
                    if log {
                        a * (b / a).powf(f)
                    } else {
                        a + (b - a) * f
                    }
                })
                .collect()
        }
        _ => return Err(bad("expected `1,2,5`, `T0:T1:COUNT` or `T0:T1:COUNT:log`")),
    };
    if times.windows(2).any(|w| w[1] <= w[0]) {
        return Err(bad("times must strictly increase"));
    }
    Ok(times)
}

#[cfg(test)]
mod testing {
    use spreadscope_physics::CorrelationMap;
    use spreadscope_physics::tolerance::close;

    /// Exact float equality by the project's tolerance helper: the inputs
    /// are decimal literals parsed by one correctly rounded conversion, so
    /// no tolerance is needed.
    pub(super) fn same(a: &[f64], b: &[f64]) -> bool {
        a.len() == b.len() && a.iter().zip(b).all(|(x, y)| close(*x, *y, 0.0, 0.0))
    }

    /// Whether grid point `(ti, xi)` is present with value `c` and error
    /// `err`.
    pub(super) fn cell(
        map: &CorrelationMap,
        ti: usize,
        xi: usize,
        c: f64,
        err: Option<f64>,
    ) -> bool {
        match (map.get(ti, xi), err) {
            (Some((got, None)), None) => same(&[got], &[c]),
            (Some((got, Some(e))), Some(want)) => same(&[got, e], &[c, want]),
            _ => false,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sniff_recognises_magic_numbers_and_leading_brace() {
        // Magic strings: NumPy NEP 1 (NPY), PKWARE APPNOTE 4.3.7 (zip).
        assert_eq!(sniff(b"\x93NUMPY\x01\x00"), Some(Format::Npy));
        assert_eq!(sniff(b"PK\x03\x04rest"), Some(Format::Npz));
        assert_eq!(sniff(b"  \n{\"x\": []}"), Some(Format::Json));
        assert_eq!(sniff(b"\xEF\xBB\xBF{}"), Some(Format::Json));
        assert_eq!(sniff(b"x,t,C\n0,0,1\n"), Some(Format::Csv));
        assert_eq!(sniff(b""), None);
        assert_eq!(sniff(b" \n\t"), None);
    }

    #[test]
    fn binary_content_sent_under_another_format_is_named_once() {
        let err = parse(
            b"PK\x03\x04\xff\xfe",
            Format::Csv,
            &IngestOptions::default(),
        )
        .expect_err("zip content is not CSV");
        assert_eq!(err.problems.len(), 1);
        assert_eq!(
            err.problems[0].reason,
            "the content is an NPZ file but format CSV was requested"
        );
        let err = parse(b"\x93NUMPY\x01\x00", Format::Npz, &IngestOptions::default())
            .expect_err("NPY content is not NPZ");
        assert_eq!(
            err.problems[0].reason,
            "the content is an NPY file but format NPZ was requested"
        );
    }

    #[test]
    fn problem_list_is_capped_with_a_count_of_the_rest() {
        let mut problems = Problems::default();
        for line in 1..=250 {
            problems.at(line, "bad");
        }
        let err = problems.into_error();
        assert_eq!(err.problems.len(), MAX_PROBLEMS);
        assert_eq!(err.problems[98].line, Some(99));
        // 250 problems, 99 listed: 151 more.
        assert_eq!(err.problems[99].reason, "…and 151 more problems");
    }

    #[test]
    fn roles_accept_aliases_case_insensitively() {
        assert_eq!(Role::of(" Site "), Some(Role::Offset));
        assert_eq!(Role::of("TIME"), Some(Role::Time));
        assert_eq!(Role::of("Czz"), Some(Role::Value));
        assert_eq!(Role::of("dC"), Some(Role::Error));
        assert_eq!(Role::of("weight"), None);
    }

    #[test]
    fn options_for_formats_with_their_own_axes_are_noted() {
        let options = IngestOptions {
            x: Some(vec![0]),
            t: None,
        };
        let ok = parse(b"x,t,C\n0,0,1\n", Format::Csv, &options).expect("valid");
        assert!(
            ok.notes.iter().any(|n| n.contains("ignored")),
            "{:?}",
            ok.notes
        );
    }
}

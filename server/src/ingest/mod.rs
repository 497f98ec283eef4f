//! Ingest: bytes → a validated [`CorrelationMap`] with line-numbered problems.
//!
//! Owns the accepted file formats (CSV long and wide, NPY, NPZ, JSON). Knows no
//! file system, database or HTTP: callers hand in bytes and get back either a
//! map or every problem found. A file with any problem is rejected whole.

use spreadscope_physics::CorrelationMap;

use crate::dataset::DatasetMeta;

/// The formats a correlation map may arrive in.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Format {
    Csv,
    Npy,
    Npz,
    Json,
}

impl std::str::FromStr for Format {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        match s.to_ascii_lowercase().as_str() {
            "csv" | "tsv" | "txt" => Ok(Self::Csv),
            "npy" => Ok(Self::Npy),
            "npz" => Ok(Self::Npz),
            "json" => Ok(Self::Json),
            other => Err(format!(
                "unknown format `{other}` (expected csv, npy, npz or json)"
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
                format!("{place}{} (and {} more problems)", p.reason, problems.len() - 1)
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
/// # Errors
/// Every problem found, each with its line where the format has lines.
pub fn parse(
    _bytes: &[u8],
    _format: Format,
    _options: &IngestOptions,
) -> Result<Ingested, IngestError> {
    // Placeholder while the parsers are written in this same change.
    Err(IngestError {
        problems: vec![Problem {
            line: None,
            reason: "parsers not built yet".into(),
        }],
    })
}

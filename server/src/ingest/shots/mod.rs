//! Shot files → [`ShotRecords`] with line-numbered problems.
//!
//! Owns the accepted shot-file layouts and every check a shot file must
//! pass; the estimator itself lives in `spreadscope_physics::model::shots`.
//! Knows no file system, database or HTTP: callers hand in a reader or bytes.
//! A file with any problem is rejected whole, with at most
//! [`MAX_PROBLEMS`](super::MAX_PROBLEMS) problems listed.
//!
//! Layouts (bit 1 = spin up, site 0 first; see the README's command-line section):
//! - CSV: columns `state_id,t,init_bits,meas_bits`, one shot per row, any
//!   number of shots per (state, time), rows in any order. The header is
//!   optional (without it the columns are in this order); with it, columns may
//!   come in any order and take the aliases of [`Column::of`]. `#` starts a
//!   comment line; blank lines are skipped; `,`, tab or `;` delimit (the
//!   first line decides). Bits are strings of `0`/`1` of one length, the
//!   chain length, fixed by the first data row. The input is read line by
//!   line from any [`BufRead`](std::io::BufRead): memory is that of the per-(state, time)
//!   counters (and the state names), never that of the text.
//! - NPZ (`numpy.savez`, uncompressed): `init` (states × sites), `meas`
//!   (shots × sites), `state` (per shot, the row of `init`), `t` (per shot).
//!   Bits may be bool, any integer type or float with values 0/1. The large
//!   `meas` member is read in place, without a copy.
//! - HDF5: the same four datasets at the root, read with the pure-Rust
//!   `hdf5-reader` crate (contiguous or chunked, gzip/shuffle filters),
//!   `meas`, `state` and `t` in blocks of rows so memory stays bounded.
//!
//! Problems carry the 1-based line for CSV (comment and blank lines count)
//! and name the array or dataset and index otherwise. Kinds: a row with
//! missing or extra fields, a bit string with characters other than 0/1 or of
//! another length than the first data row's, a time that is not a finite
//! number ≥ 0, an empty state name, a state whose initial bits differ from
//! those on its first row (both lines named), an over-long line, undecodable
//! text, and for the array formats wrong shapes, dtypes, bit values and state
//! indices.
//!
//! Parts: this file holds the formats ([`ShotFormat`], [`parse`]) and what
//! every layout returns ([`ShotsIngested`]); `csv` the streamed CSV reader;
//! `arrays` the NPZ and HDF5 layouts and the one routine that checks shot
//! arrays and turns them into records. HDF5 correlation maps are read by
//! `ingest::hdf5` ([`parse_hdf5_map`] is re-exported here for old callers).

mod arrays;
mod csv;

use spreadscope_physics::model::shots::ShotRecords;

pub use self::arrays::{parse_hdf5, parse_npz};
pub use self::csv::{Column, MAX_LINE_BYTES, parse_csv};
use super::hdf5::HDF5_MAGIC;
pub use super::hdf5::parse_hdf5_map;
use super::{IngestError, Problem, ZIP_MAGIC};

/// The formats a shot file may arrive in.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ShotFormat {
    Csv,
    Npz,
    Hdf5,
}

impl std::str::FromStr for ShotFormat {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        match s.to_ascii_lowercase().as_str() {
            "csv" | "tsv" | "txt" => Ok(Self::Csv),
            "npz" => Ok(Self::Npz),
            "h5" | "hdf5" | "hdf" => Ok(Self::Hdf5),
            other => Err(format!(
                "unknown shot format `{other}` (expected csv, npz or h5)"
            )),
        }
    }
}

impl ShotFormat {
    /// Guesses the format from a file name's extension.
    #[must_use]
    pub fn from_file_name(name: &str) -> Option<Self> {
        name.rsplit_once('.').and_then(|(_, ext)| ext.parse().ok())
    }

    /// Guesses the format from the first bytes: HDF5 and zip signatures,
    /// CSV otherwise (`None` when there is nothing).
    #[must_use]
    pub fn sniff(bytes: &[u8]) -> Option<Self> {
        if bytes.starts_with(HDF5_MAGIC) {
            Some(Self::Hdf5)
        } else if bytes.starts_with(ZIP_MAGIC) {
            Some(Self::Npz)
        } else if bytes.iter().all(u8::is_ascii_whitespace) {
            None
        } else {
            Some(Self::Csv)
        }
    }
}

/// Successfully read shots.
#[derive(Debug, Clone)]
pub struct ShotsIngested {
    pub records: ShotRecords,
    /// The name of every initial state, by its index in the records: the
    /// CSV `state_id`, or the row number of `init` for the array formats.
    pub state_names: Vec<String>,
    /// Facts worth telling the person (counts, ignored arrays).
    pub notes: Vec<String>,
}

/// Parses `bytes` in `format`. HDF5 input is copied once (the reader needs
/// an owner); call [`parse_hdf5`] with an owned buffer to avoid the copy.
///
/// # Errors
/// Every problem found, as in the format's own parser.
pub fn parse(bytes: &[u8], format: ShotFormat) -> Result<ShotsIngested, IngestError> {
    match format {
        ShotFormat::Csv => parse_csv(bytes),
        ShotFormat::Npz => parse_npz(bytes),
        ShotFormat::Hdf5 => parse_hdf5(bytes.to_vec()),
    }
}

fn one_problem(reason: impl Into<String>) -> IngestError {
    IngestError {
        problems: vec![Problem {
            line: None,
            reason: reason.into(),
        }],
    }
}

fn summary_note(records: &ShotRecords) -> String {
    format!(
        "{} shots of {} initial states at {} times on {} sites",
        records.total_shots(),
        records.n_states(),
        records.times().len(),
        records.sites()
    )
}

/// State names of the array formats: the row numbers of `init`.
fn row_names(records: &ShotRecords) -> Vec<String> {
    (0..records.n_states()).map(|k| k.to_string()).collect()
}

#[cfg(test)]
mod fixtures {
    //! Fixtures in `tests/reference/shots/` are SYNTHETIC and written by
    //! numpy 2.4.6 / h5py 3.16.0 (HDF5 2.0.0) through
    //! `tests/reference/shots/make_fixtures.py`: the same 30 shots as CSV,
    //! NPZ and two HDF5 layouts, so each reader is checked against files
    //! produced by the formats' own reference libraries.

    use super::{ShotsIngested, parse_csv};

    pub(super) const CSV: &[u8] = include_bytes!("../../../../tests/reference/shots/shots.csv");
    pub(super) const NPZ: &[u8] = include_bytes!("../../../../tests/reference/shots/shots.npz");
    pub(super) const H5_CHUNKED: &[u8] =
        include_bytes!("../../../../tests/reference/shots/shots_chunked.h5");
    pub(super) const H5_CONTIGUOUS: &[u8] =
        include_bytes!("../../../../tests/reference/shots/shots_contiguous.h5");
    pub(super) const H5_BAD: &[u8] =
        include_bytes!("../../../../tests/reference/shots/shots_bad.h5");
    pub(super) const H5_MAP: &[u8] = include_bytes!("../../../../tests/reference/shots/map.h5");

    /// Asserts that `other` holds the same shots as the CSV fixture, with
    /// array row k standing for CSV state `s{k}`.
    pub(super) fn same_as_csv(other: &ShotsIngested) {
        let csv = parse_csv(CSV).expect("fixture CSV");
        let (a, b) = (&csv.records, &other.records);
        assert_eq!(a.sites(), b.sites());
        assert_eq!(a.n_states(), b.n_states());
        assert_eq!(a.total_shots(), b.total_shots());
        assert_eq!(a.times(), b.times());
        for (i, name) in csv.state_names.iter().enumerate() {
            let k: usize = name.trim_start_matches('s').parse().expect("s<k>");
            assert_eq!(a.initial_bits(i), b.initial_bits(k), "state {name}");
            for ti in 0..a.times().len() {
                assert_eq!(a.counts(i, ti), b.counts(k, ti), "state {name}, time {ti}");
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::fixtures::{CSV, H5_MAP, NPZ};
    use super::*;

    #[test]
    fn formats_are_recognised_by_name_and_content() {
        assert_eq!(ShotFormat::from_file_name("run.h5"), Some(ShotFormat::Hdf5));
        assert_eq!(ShotFormat::from_file_name("run.NPZ"), Some(ShotFormat::Npz));
        assert_eq!(ShotFormat::from_file_name("run.csv"), Some(ShotFormat::Csv));
        assert_eq!(ShotFormat::from_file_name("run"), None);
        // Signatures: HDF5 File Format Specification §II.A; PKWARE
        // APPNOTE 4.3.7.
        assert_eq!(ShotFormat::sniff(H5_MAP), Some(ShotFormat::Hdf5));
        assert_eq!(ShotFormat::sniff(NPZ), Some(ShotFormat::Npz));
        assert_eq!(ShotFormat::sniff(CSV), Some(ShotFormat::Csv));
        assert_eq!(ShotFormat::sniff(b" \n"), None);
    }
}

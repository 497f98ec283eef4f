//! Shot files → [`ShotRecords`] with line-numbered problems, and correlation
//! maps stored as HDF5.
//!
//! Owns the accepted shot-file layouts and every check a shot file must
//! pass; the estimator itself lives in `spreadscope_physics::model::shots`.
//! Knows no file system, database or HTTP: callers hand in a reader or bytes.
//! A file with any problem is rejected whole, with at most
//! [`MAX_PROBLEMS`](super::MAX_PROBLEMS) problems listed.
//!
//! Layouts (bit 1 = spin up, site 0 first; see `DESIGN.md`):
//! - CSV: columns `state_id,t,init_bits,meas_bits`, one shot per row, any
//!   number of shots per (state, time), rows in any order. The header is
//!   optional (without it the columns are in this order); with it, columns may
//!   come in any order and take the aliases of [`Column::of`]. `#` starts a
//!   comment line; blank lines are skipped; `,`, tab or `;` delimit (the
//!   first line decides). Bits are strings of `0`/`1` of one length, the
//!   chain length, fixed by the first data row. The input is read line by
//!   line from any [`BufRead`]: memory is that of the per-(state, time)
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
//! HDF5 correlation maps ([`parse_hdf5_map`]): datasets `C` (times ×
//! offsets), `t`, `x` and optional `err` and `mask` (true = present), with
//! the rules of the NPZ map reader, returning the same [`Ingested`] as
//! [`super::parse`].

use std::collections::HashMap;
use std::io::{BufRead, Cursor, Read};

use hdf5_reader::{Datatype, H5Type, Hdf5File, SliceInfo, SliceInfoElem};
use spreadscope_physics::model::shots::{MAX_SITES, ShotAccumulator, ShotError, ShotRecords};

use super::grid::{self, Point};
use super::{IngestError, Ingested, Problem, Problems};
use crate::dataset::DatasetMeta;

/// The longest CSV line accepted: a row of a 4096-site chain is about 8 kB,
/// so anything near this is not a shot row, and holding it would defeat the
/// streaming.
pub const MAX_LINE_BYTES: usize = 1 << 20;

/// Shots per block when reading `meas`, `state` and `t` from HDF5: bounded
/// memory (a block of a 4096-site chain is 256 MiB at most as f64, typically
/// ~20 MiB) with few read calls.
const HDF5_BLOCK_ROWS: u64 = 1 << 16;

/// The UTF-8 byte order mark some spreadsheet programs write.
const BOM: &[u8] = b"\xEF\xBB\xBF";

/// The HDF5 format signature (HDF5 File Format Specification, §II.A).
const HDF5_MAGIC: &[u8] = b"\x89HDF\r\n\x1a\n";

/// The zip local file header signature that opens an NPZ archive (PKWARE
/// APPNOTE.TXT 4.3.7).
const ZIP_MAGIC: &[u8] = b"PK\x03\x04";

/// The NPY magic string (NumPy NEP 1).
const NPY_MAGIC: &[u8] = b"\x93NUMPY";

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

// ---------------------------------------------------------------- CSV ----

/// The meaning of a CSV column.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Column {
    State,
    Time,
    Init,
    Meas,
}

impl Column {
    const ALL: [Self; 4] = [Self::State, Self::Time, Self::Init, Self::Meas];

    fn name(self) -> &'static str {
        match self {
            Self::State => "state_id",
            Self::Time => "t",
            Self::Init => "init_bits",
            Self::Meas => "meas_bits",
        }
    }

    /// The column a header name stands for (case-insensitive, surrounding
    /// white space ignored): `state_id`, `state`, `state_index`; `t`,
    /// `time`; `init_bits`, `init`, `initial_bits`, `initial`; `meas_bits`,
    /// `meas`, `measured_bits`, `bits`, `outcome`.
    #[must_use]
    pub fn of(name: &str) -> Option<Self> {
        match name.trim().to_lowercase().as_str() {
            "state_id" | "state" | "state_index" => Some(Self::State),
            "t" | "time" => Some(Self::Time),
            "init_bits" | "init" | "initial_bits" | "initial" => Some(Self::Init),
            "meas_bits" | "meas" | "measured_bits" | "bits" | "outcome" => Some(Self::Meas),
            _ => None,
        }
    }
}

/// Where each column sits in a row.
#[derive(Debug, Clone, Copy)]
struct Layout {
    delimiter: char,
    fields: usize,
    state: usize,
    time: usize,
    init: usize,
    meas: usize,
}

impl Layout {
    const DEFAULT_ORDER: &'static str = "state_id,t,init_bits,meas_bits";

    fn positional(delimiter: char) -> Self {
        Self {
            delimiter,
            fields: 4,
            state: 0,
            time: 1,
            init: 2,
            meas: 3,
        }
    }
}

fn unquote(cell: &str) -> &str {
    let cell = cell.trim();
    cell.strip_prefix('"')
        .and_then(|c| c.strip_suffix('"'))
        .unwrap_or(cell)
}

fn detect_delimiter(line: &str) -> char {
    [',', '\t', ';']
        .into_iter()
        .find(|d| line.contains(*d))
        .unwrap_or(',')
}

/// Reads lines of at most [`MAX_LINE_BYTES`] from a `BufRead`, reusing one
/// buffer; longer lines are skipped and reported.
struct Lines<R> {
    reader: R,
    buf: Vec<u8>,
    line: usize,
}

enum NextLine {
    End,
    Text,
    Overlong,
}

impl<R: BufRead> Lines<R> {
    fn next(&mut self) -> std::io::Result<NextLine> {
        self.buf.clear();
        let limit = MAX_LINE_BYTES as u64 + 1;
        let n = (&mut self.reader)
            .take(limit)
            .read_until(b'\n', &mut self.buf)?;
        if n == 0 {
            return Ok(NextLine::End);
        }
        self.line += 1;
        if self.buf.last() != Some(&b'\n') && self.buf.len() > MAX_LINE_BYTES {
            // Discard the rest of the line without holding it.
            loop {
                self.buf.clear();
                let n = (&mut self.reader)
                    .take(limit)
                    .read_until(b'\n', &mut self.buf)?;
                if n == 0 || self.buf.last() == Some(&b'\n') {
                    break;
                }
            }
            self.buf.clear();
            return Ok(NextLine::Overlong);
        }
        while matches!(self.buf.last(), Some(b'\n' | b'\r')) {
            self.buf.pop();
        }
        if self.line == 1 && self.buf.starts_with(BOM) {
            self.buf.drain(..BOM.len());
        }
        Ok(NextLine::Text)
    }
}

/// The state of a CSV parse between rows.
struct CsvState {
    problems: Problems,
    layout: Option<Layout>,
    /// Chain length and the line that fixed it.
    sites: Option<(usize, usize)>,
    acc: Option<ShotAccumulator>,
    /// State name → (index, first line).
    states: HashMap<Box<str>, (usize, usize)>,
    /// Initial bits of states seen while the accumulator could not be made
    /// (so later rows can still be compared), by index.
    pending_init: Vec<Vec<u8>>,
    last_state: Option<(Box<str>, usize)>,
    data_rows: usize,
}

impl CsvState {
    fn new() -> Self {
        Self {
            problems: Problems::default(),
            layout: None,
            sites: None,
            acc: None,
            states: HashMap::new(),
            pending_init: Vec::new(),
            last_state: None,
            data_rows: 0,
        }
    }

    /// Reads the header (or decides there is none) from the first content
    /// line; returns `true` when the line was a header.
    fn header(&mut self, text: &str, line: usize) -> bool {
        let delimiter = detect_delimiter(text);
        let cells: Vec<&str> = text.split(delimiter).map(unquote).collect();
        let looks_like_data =
            cells.len() == 4 && grid::number_from_text(cells[1]).is_ok() && !cells[2].is_empty();
        if looks_like_data {
            self.layout = Some(Layout::positional(delimiter));
            return false;
        }
        let mut slots: [Option<usize>; 4] = [None; 4];
        for (index, cell) in cells.iter().enumerate() {
            match Column::of(cell) {
                Some(column) => {
                    let slot = &mut slots[column as usize];
                    if let Some(first) = slot {
                        self.problems.at(
                            line,
                            format!(
                                "header: columns {} and {} both mean `{}`",
                                *first + 1,
                                index + 1,
                                column.name()
                            ),
                        );
                    } else {
                        *slot = Some(index);
                    }
                }
                None => self.problems.at(
                    line,
                    format!(
                        "header: unknown column `{cell}` (expected {})",
                        Layout::DEFAULT_ORDER
                    ),
                ),
            }
        }
        for column in Column::ALL {
            if slots[column as usize].is_none() {
                self.problems
                    .at(line, format!("header: no `{}` column", column.name()));
            }
        }
        if let [Some(state), Some(time), Some(init), Some(meas)] = slots {
            self.layout = Some(Layout {
                delimiter,
                fields: cells.len(),
                state,
                time,
                init,
                meas,
            });
        }
        true
    }

    /// Checks a bit string; `Err` is the reason.
    fn bits_problem(&self, what: Column, bits: &str) -> Option<String> {
        if bits.is_empty() {
            return Some(format!("{} is empty", what.name()));
        }
        if let Some((pos, c)) = bits
            .chars()
            .enumerate()
            .find(|(_, c)| !matches!(c, '0' | '1'))
        {
            return Some(format!(
                "{} `{}` has `{c}` at position {}; bits are 0 or 1",
                what.name(),
                shorten(bits),
                pos + 1
            ));
        }
        let (sites, first_line) = self.sites?;
        (bits.len() != sites).then(|| {
            let hint = if bits.len() < sites && bits.starts_with('1') {
                " (leading zeros lost, e.g. by a spreadsheet?)"
            } else {
                ""
            };
            format!(
                "{} has {} bits but the first data row (line {first_line}) has {sites}{hint}",
                what.name(),
                bits.len()
            )
        })
    }

    fn row(&mut self, text: &str, line: usize) {
        let Some(layout) = self.layout else {
            return;
        };
        self.data_rows += 1;
        let cells: Vec<&str> = text.split(layout.delimiter).map(unquote).collect();
        if cells.len() != layout.fields {
            let kind = if cells.len() < layout.fields {
                "missing fields"
            } else {
                "extra fields"
            };
            self.problems.at(
                line,
                format!(
                    "{kind}: expected {} fields, found {}",
                    layout.fields,
                    cells.len()
                ),
            );
            return;
        }
        let (name, t_text, init, meas) = (
            cells[layout.state],
            cells[layout.time],
            cells[layout.init],
            cells[layout.meas],
        );
        let mut ok = true;
        if name.is_empty() {
            self.problems.at(line, "state_id is empty");
            ok = false;
        }
        let t = match grid::checked_from_text(t_text, grid::time_value) {
            Ok(t) => Some(t),
            Err(reason) => {
                self.problems.at(line, format!("t {reason}"));
                ok = false;
                None
            }
        };
        // The first row with a clean initial bit string fixes the length.
        if self.sites.is_none() && self.bits_problem(Column::Init, init).is_none() {
            self.sites = Some((init.len(), line));
            if init.len() > MAX_SITES {
                self.problems.at(
                    line,
                    format!(
                        "init_bits has {} bits; at most {MAX_SITES} sites are supported",
                        init.len()
                    ),
                );
            } else {
                self.acc = ShotAccumulator::new(init.len()).ok();
            }
        }
        let init_ok = match self.bits_problem(Column::Init, init) {
            Some(reason) => {
                self.problems.at(line, reason);
                false
            }
            None => true,
        };
        if let Some(reason) = self.bits_problem(Column::Meas, meas) {
            self.problems.at(line, reason);
            ok = false;
        }
        // A state is registered (so later rows can be compared with it)
        // whenever its name and initial bits are readable; the shot is
        // counted only while the file is free of problems, since a file with
        // any problem is rejected whole anyway.
        if name.is_empty() || !init_ok {
            return;
        }
        let Some(state) = self.state_index(name, init, line) else {
            return;
        };
        if !ok || !self.problems.is_empty() {
            return;
        }
        if let (Some(acc), Some(t)) = (self.acc.as_mut(), t) {
            if let Err(e) = acc.add_shot(state, t, meas.as_bytes()) {
                self.problems.at(line, e.to_string());
            }
        }
    }

    /// The index of state `name`, declaring it on first sight; `None` (with a
    /// problem) when its initial bits differ from its first row's.
    fn state_index(&mut self, name: &str, init: &str, line: usize) -> Option<usize> {
        let known = match &self.last_state {
            Some((last, index)) if **last == *name => Some(*index),
            _ => self.states.get(name).map(|&(index, _)| index),
        };
        if let Some(index) = known {
            let stored: &[u8] = match &self.acc {
                Some(acc) => acc.initial_bits(index).unwrap_or_default(),
                None => self.pending_init.get(index).map_or(&[], Vec::as_slice),
            };
            let same = stored.len() == init.len()
                && stored.iter().zip(init.bytes()).all(|(a, b)| a & 1 == b & 1);
            if !same {
                let first = self.states.get(name).map_or(0, |&(_, l)| l);
                let before: String = stored.iter().map(|b| char::from(b'0' + (b & 1))).collect();
                self.problems.at(
                    line,
                    format!(
                        "state `{}` has initial bits {} here but {} on line {first}",
                        shorten(name),
                        shorten(init),
                        shorten(&before)
                    ),
                );
                return None;
            }
            self.last_state = Some((name.into(), index));
            return Some(index);
        }
        let index = match self.acc.as_mut() {
            Some(acc) => match acc.add_state(init.as_bytes()) {
                Ok(index) => index,
                Err(e) => {
                    self.problems.at(line, e.to_string());
                    return None;
                }
            },
            None => {
                self.pending_init
                    .push(init.bytes().map(|b| b & 1).collect());
                self.pending_init.len() - 1
            }
        };
        self.states.insert(name.into(), (index, line));
        self.last_state = Some((name.into(), index));
        Some(index)
    }
}

/// A long value cut for a message.
fn shorten(text: &str) -> String {
    const KEEP: usize = 48;
    if text.chars().count() <= KEEP {
        text.to_string()
    } else {
        let head: String = text.chars().take(KEEP).collect();
        format!("{head}…")
    }
}

/// Parses a CSV shot file streamed from `reader`. See the module
/// documentation for the layout.
///
/// # Errors
/// Every problem found (at most [`MAX_PROBLEMS`](super::MAX_PROBLEMS)), each
/// with its line.
pub fn parse_csv<R: BufRead>(reader: R) -> Result<ShotsIngested, IngestError> {
    let mut lines = Lines {
        reader,
        buf: Vec::new(),
        line: 0,
    };
    let mut state = CsvState::new();
    let mut seen_content = false;
    loop {
        let next = match lines.next() {
            Ok(next) => next,
            Err(e) => {
                state.problems.general(format!(
                    "the input could not be read after line {}: {e}",
                    lines.line
                ));
                break;
            }
        };
        let line = lines.line;
        match next {
            NextLine::End => break,
            NextLine::Overlong => {
                state.problems.at(
                    line,
                    format!("the line is longer than {MAX_LINE_BYTES} bytes"),
                );
                continue;
            }
            NextLine::Text => {}
        }
        let Ok(text) = std::str::from_utf8(&lines.buf) else {
            state.problems.at(line, "the line is not valid UTF-8 text");
            continue;
        };
        let trimmed = text.trim();
        if trimmed.is_empty() || trimmed.starts_with('#') {
            continue;
        }
        if !seen_content {
            seen_content = true;
            if state.header(trimmed, line) {
                continue;
            }
        }
        state.row(trimmed, line);
    }
    if !seen_content {
        state
            .problems
            .general("the file holds no shots (it is empty)");
    } else if state.data_rows == 0 && state.layout.is_some() {
        state
            .problems
            .general("the file has a header but no shot rows");
    }
    let CsvState {
        problems,
        acc,
        states,
        ..
    } = state;
    problems.check()?;
    let acc = acc.ok_or_else(|| one_problem("the file holds no shots"))?;
    let records = acc.finish().map_err(|e| one_problem(e.to_string()))?;
    let mut state_names = vec![String::new(); records.n_states()];
    for (name, (index, _)) in states {
        if let Some(slot) = state_names.get_mut(index) {
            *slot = name.into();
        }
    }
    Ok(ShotsIngested {
        notes: vec![summary_note(&records)],
        state_names,
        records,
    })
}

// ------------------------------------------------------ NPY / NPZ --------

/// The element kinds of NumPy dtypes this reader decodes.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Kind {
    Float,
    Int,
    UInt,
    Bool,
}

/// A read-only view of an `.npy` member: its header and its data bytes in
/// place (NumPy NEP 1).
#[derive(Debug)]
struct NpyView<'a> {
    name: &'static str,
    descr: String,
    kind: Kind,
    size: usize,
    big_endian: bool,
    fortran: bool,
    shape: Vec<usize>,
    data: &'a [u8],
}

fn dtype(descr: &str) -> Option<(Kind, usize, bool)> {
    let (order, rest) = descr.split_at_checked(1)?;
    let big_endian = match order {
        "<" | "|" | "=" => false,
        ">" => true,
        _ => return None,
    };
    let (code, size) = rest.split_at_checked(1)?;
    let size: usize = size.parse().ok()?;
    let kind = match (code, size) {
        ("f", 4 | 8) => Kind::Float,
        ("i", 1 | 2 | 4 | 8) => Kind::Int,
        ("u", 1 | 2 | 4 | 8) => Kind::UInt,
        ("b", 1) => Kind::Bool,
        _ => return None,
    };
    Some((kind, size, big_endian))
}

/// The value of `key` in an NPY header dictionary, as raw text.
fn header_value<'h>(header: &'h str, key: &str) -> Option<&'h str> {
    let at = header
        .find(&format!("'{key}'"))
        .or_else(|| header.find(&format!("\"{key}\"")))?;
    let rest = header.get(at + key.len() + 2..)?.trim_start();
    let rest = rest.strip_prefix(':')?.trim_start();
    let end = match rest.chars().next()? {
        '(' => rest.find(')')? + 1,
        q @ ('\'' | '"') => rest[1..].find(q)? + 2,
        _ => rest.find([',', '}']).unwrap_or(rest.len()),
    };
    Some(rest[..end].trim())
}

fn read_npy<'a>(name: &'static str, bytes: &'a [u8]) -> Result<NpyView<'a>, String> {
    let rest = bytes
        .strip_prefix(NPY_MAGIC)
        .ok_or("not an NPY array (the magic string \\x93NUMPY is missing)")?;
    let (header_len, header_start) = match rest {
        [1, _, a, b, ..] => (usize::from(u16::from_le_bytes([*a, *b])), 4usize),
        [2 | 3, _, a, b, c, d, ..] => (
            usize::try_from(u32::from_le_bytes([*a, *b, *c, *d]))
                .map_err(|_| "the NPY header is too long")?,
            6,
        ),
        [major, minor, ..] if !(1..=3).contains(major) => {
            return Err(format!("NPY version {major}.{minor} is not supported"));
        }
        _ => return Err("the NPY header is truncated".into()),
    };
    let header_end = header_start
        .checked_add(header_len)
        .ok_or("the NPY header is too long")?;
    let header = rest
        .get(header_start..header_end)
        .and_then(|h| std::str::from_utf8(h).ok())
        .ok_or("the NPY header is truncated or not text")?;
    let descr = header_value(header, "descr")
        .map(|d| d.trim_matches(['\'', '"']).to_string())
        .ok_or("the NPY header has no `descr`")?;
    let fortran = match header_value(header, "fortran_order") {
        Some("True") => true,
        Some("False") => false,
        _ => return Err("the NPY header has no readable `fortran_order`".into()),
    };
    let shape_text = header_value(header, "shape").ok_or("the NPY header has no `shape`")?;
    let shape = shape_text
        .trim_matches(['(', ')'])
        .split(',')
        .map(|d| d.trim().trim_end_matches('L'))
        .filter(|d| !d.is_empty())
        .map(|d| d.parse::<usize>())
        .collect::<Result<Vec<usize>, _>>()
        .map_err(|_| format!("the shape {shape_text} is not a tuple of whole numbers"))?;
    let (kind, size, big_endian) = dtype(&descr).ok_or_else(|| {
        format!("dtype `{descr}` is not supported (expected bool, an integer type or a float)")
    })?;
    let needed = shape
        .iter()
        .try_fold(size, |n, &d| n.checked_mul(d))
        .ok_or_else(|| format!("shape {shape:?} is too large"))?;
    let data = &rest[header_end.min(rest.len())..];
    if data.len() != needed {
        return Err(format!(
            "the data hold {} bytes where shape {shape:?} of `{descr}` needs {needed}",
            data.len()
        ));
    }
    Ok(NpyView {
        name,
        descr,
        kind,
        size,
        big_endian,
        fortran,
        shape,
        data,
    })
}

fn bytes_of<const N: usize>(chunk: &[u8], big_endian: bool) -> [u8; N] {
    let mut out = [0u8; N];
    out.copy_from_slice(&chunk[..N]);
    if big_endian {
        out.reverse();
    }
    out
}

impl NpyView<'_> {
    /// Element `index` (in memory order) as f64. Integers beyond 2^53 lose
    /// precision, which only matters for values that are refused anyway.
    fn at(&self, index: usize) -> f64 {
        let chunk = &self.data[index * self.size..(index + 1) * self.size];
        let be = self.big_endian;
        match (self.kind, self.size) {
            (Kind::Float, 4) => f64::from(f32::from_le_bytes(bytes_of(chunk, be))),
            (Kind::Float, _) => f64::from_le_bytes(bytes_of(chunk, be)),
            (Kind::Int, 1) => f64::from(chunk[0] as i8),
            (Kind::Int, 2) => f64::from(i16::from_le_bytes(bytes_of(chunk, be))),
            (Kind::Int, 4) => f64::from(i32::from_le_bytes(bytes_of(chunk, be))),
            (Kind::Int, _) => i64::from_le_bytes(bytes_of(chunk, be)) as f64,
            (Kind::UInt | Kind::Bool, 1) => f64::from(chunk[0]),
            (Kind::UInt, 2) => f64::from(u16::from_le_bytes(bytes_of(chunk, be))),
            (Kind::UInt, 4) => f64::from(u32::from_le_bytes(bytes_of(chunk, be))),
            (Kind::UInt | Kind::Bool, _) => u64::from_le_bytes(bytes_of(chunk, be)) as f64,
        }
    }

    /// Element `(i, j)` of a 2-D array in either memory order.
    fn at2(&self, i: usize, j: usize) -> f64 {
        let (rows, cols) = (self.shape[0], self.shape[1]);
        self.at(if self.fortran {
            j * rows + i
        } else {
            i * cols + j
        })
    }

    fn dim2(&self) -> Option<(usize, usize)> {
        match self.shape.as_slice() {
            [r, c] => Some((*r, *c)),
            _ => None,
        }
    }

    fn len1(&self) -> Option<usize> {
        match self.shape.as_slice() {
            [n] => Some(*n),
            _ => None,
        }
    }

    /// Unsigned one-byte bits in C order can be handed to the accumulator in
    /// place (a value above 1 is still found and reported).
    fn is_byte_rows(&self) -> bool {
        self.size == 1 && !self.fortran && matches!(self.kind, Kind::UInt | Kind::Bool)
    }
}

/// The member names (without `.npy`) each shot array may take.
const NPZ_NAMES: [(&str, &[&str]); 4] = [
    ("init", &["init", "init_bits", "initial"]),
    ("meas", &["meas", "meas_bits", "bits", "outcome"]),
    ("state", &["state", "state_id", "state_index"]),
    ("t", &["t", "time", "times"]),
];

/// Parses an NPZ shot archive (`numpy.savez`, uncompressed). See the module
/// documentation for the arrays.
///
/// # Errors
/// Every problem found, naming the array and index.
pub fn parse_npz(bytes: &[u8]) -> Result<ShotsIngested, IngestError> {
    let mut archive = zip::ZipArchive::new(Cursor::new(bytes))
        .map_err(|e| one_problem(format!("not a readable NPZ (zip) archive: {e}")))?;
    let mut problems = Problems::default();
    let mut views: [Option<NpyView>; 4] = [None, None, None, None];
    let mut ignored = Vec::new();
    for index in 0..archive.len() {
        let entry = match archive.by_index(index) {
            Ok(entry) => entry,
            Err(e) => {
                problems.general(format!("archive member {index} cannot be read: {e}"));
                continue;
            }
        };
        let name = entry.name().to_string();
        let stem = name.strip_suffix(".npy").unwrap_or(&name);
        let Some(slot) = NPZ_NAMES
            .iter()
            .position(|(_, aliases)| aliases.contains(&stem))
        else {
            ignored.push(format!("`{stem}`"));
            continue;
        };
        if entry.compression() != zip::CompressionMethod::Stored {
            problems.general(format!(
                "array `{stem}` is compressed ({}); only uncompressed archives are read: \
                 save with numpy.savez, not numpy.savez_compressed",
                entry.compression()
            ));
            continue;
        }
        // A stored member's data lie in place in the archive: read them
        // without a copy.
        let start = usize::try_from(entry.data_start()).unwrap_or(usize::MAX);
        let len = usize::try_from(entry.compressed_size()).unwrap_or(usize::MAX);
        let Some(member) = start.checked_add(len).and_then(|end| bytes.get(start..end)) else {
            problems.general(format!("array `{stem}` is truncated in the archive"));
            continue;
        };
        let canonical = NPZ_NAMES[slot].0;
        match read_npy(canonical, member) {
            Ok(view) => {
                if views[slot].is_some() {
                    problems.general(format!("two arrays play the part of `{canonical}`"));
                }
                views[slot] = Some(view);
            }
            Err(reason) => problems.general(format!("array `{stem}`: {reason}")),
        }
    }
    for (slot, (name, aliases)) in NPZ_NAMES.iter().enumerate() {
        if views[slot].is_none() {
            problems.general(format!(
                "the archive has no array `{name}` (also accepted: {})",
                aliases.join(", ")
            ));
        }
    }
    problems.check()?;
    let [Some(init), Some(meas), Some(state), Some(t)] = views else {
        return Err(one_problem("the archive lacks a shot array"));
    };
    let records = shots_from_arrays(
        &ArraySource::Npy(&init),
        &mut NpyShots {
            meas: &meas,
            state: &state,
            t: &t,
        },
    )?;
    let mut notes = vec![summary_note(&records)];
    if !ignored.is_empty() {
        notes.push(format!("ignored arrays: {}", ignored.join(", ")));
    }
    Ok(ShotsIngested {
        state_names: row_names(&records),
        records,
        notes,
    })
}

// ------------------------------------------- shared array-shot logic -----

/// The initial-state array of either array format.
enum ArraySource<'a> {
    Npy(&'a NpyView<'a>),
    Dense {
        name: &'static str,
        shape: (usize, usize),
        values: Vec<f64>,
    },
}

impl ArraySource<'_> {
    fn shape(&self) -> Result<(usize, usize), String> {
        match self {
            Self::Npy(v) => v.dim2().ok_or_else(|| {
                format!(
                    "array `init` has shape {:?}; expected states × sites",
                    v.shape
                )
            }),
            Self::Dense { shape, .. } => Ok(*shape),
        }
    }

    fn at2(&self, i: usize, j: usize) -> f64 {
        match self {
            Self::Npy(v) => v.at2(i, j),
            Self::Dense { shape, values, .. } => values[i * shape.1 + j],
        }
    }

    fn name(&self) -> &'static str {
        match self {
            Self::Npy(v) => v.name,
            Self::Dense { name, .. } => name,
        }
    }
}

/// One block of shots from `meas`, `state` and `t`.
struct ShotBlock {
    /// First shot index of the block.
    first: usize,
    rows: usize,
    /// `rows × sites` bits (validated later), state indices and times.
    meas: Vec<f64>,
    state: Vec<f64>,
    t: Vec<f64>,
}

/// The per-shot arrays of either array format, read in blocks.
trait ShotSource {
    /// (shots, sites) of `meas`, and the lengths of `state` and `t`.
    fn shapes(&self) -> Result<((usize, usize), usize, usize), Vec<String>>;
    /// Name of the container ("array" or "dataset").
    fn noun(&self) -> &'static str;
    /// Calls `each` with the shots in blocks; `fast` receives in-place byte
    /// rows when the format has them (then `meas` of the block is empty).
    fn blocks(
        &mut self,
        sites: usize,
        each: &mut dyn FnMut(&ShotBlock, Option<&[u8]>),
    ) -> Result<(), String>;
}

struct NpyShots<'a> {
    meas: &'a NpyView<'a>,
    state: &'a NpyView<'a>,
    t: &'a NpyView<'a>,
}

impl ShotSource for NpyShots<'_> {
    fn shapes(&self) -> Result<((usize, usize), usize, usize), Vec<String>> {
        let mut problems = Vec::new();
        let meas = self.meas.dim2();
        if meas.is_none() {
            problems.push(format!(
                "array `meas` has shape {:?}; expected shots × sites",
                self.meas.shape
            ));
        }
        for v in [self.state, self.t] {
            if v.len1().is_none() {
                problems.push(format!(
                    "array `{}` has shape {:?}; expected one value per shot",
                    v.name, v.shape
                ));
            }
        }
        if self.state.kind == Kind::Float {
            problems.push(format!(
                "array `state` has dtype `{}`; state indices must be integers",
                self.state.descr
            ));
        }
        match (meas, self.state.len1(), self.t.len1()) {
            (Some(m), Some(s), Some(t)) if problems.is_empty() => Ok((m, s, t)),
            _ => Err(problems),
        }
    }

    fn noun(&self) -> &'static str {
        "array"
    }

    fn blocks(
        &mut self,
        sites: usize,
        each: &mut dyn FnMut(&ShotBlock, Option<&[u8]>),
    ) -> Result<(), String> {
        let shots = self.meas.shape[0];
        let block_rows = HDF5_BLOCK_ROWS as usize;
        let mut first = 0;
        while first < shots {
            let rows = block_rows.min(shots - first);
            let fast = self.meas.is_byte_rows();
            let meas = if fast {
                Vec::new()
            } else {
                let mut v = Vec::with_capacity(rows * sites);
                for k in first..first + rows {
                    for i in 0..sites {
                        v.push(self.meas.at2(k, i));
                    }
                }
                v
            };
            let block = ShotBlock {
                first,
                rows,
                meas,
                state: (first..first + rows).map(|k| self.state.at(k)).collect(),
                t: (first..first + rows).map(|k| self.t.at(k)).collect(),
            };
            let bytes = fast.then(|| &self.meas.data[first * sites..(first + rows) * sites]);
            each(&block, bytes);
            first += rows;
        }
        Ok(())
    }
}

/// A bit value from an array: exactly 0 or 1.
fn bit_of(v: f64) -> Option<u8> {
    if v.to_bits() == 0f64.to_bits() || v.to_bits() == (-0f64).to_bits() {
        Some(0)
    } else if v.to_bits() == 1f64.to_bits() {
        Some(1)
    } else {
        None
    }
}

/// Builds records from an initial-state array and per-shot arrays,
/// collecting every problem (named by array and index).
fn shots_from_arrays(
    init: &ArraySource,
    shots: &mut dyn ShotSource,
) -> Result<ShotRecords, IngestError> {
    let mut problems = Problems::default();
    let noun = shots.noun();
    let init_shape = init.shape().map_err(one_problem)?;
    let ((n_shots, sites), n_state, n_t) = shots.shapes().map_err(|list| IngestError {
        problems: list
            .into_iter()
            .map(|reason| Problem { line: None, reason })
            .collect(),
    })?;
    let (n_states, init_sites) = init_shape;
    if init_sites != sites {
        problems.general(format!(
            "{noun} `{}` has {init_sites} sites per state but `meas` has {sites} per shot",
            init.name()
        ));
    }
    for (name, len) in [("state", n_state), ("t", n_t)] {
        if len != n_shots {
            problems.general(format!(
                "{noun} `{name}` has {len} entries but `meas` has {n_shots} shots"
            ));
        }
    }
    if n_shots == 0 {
        problems.general(format!("{noun} `meas` holds no shots"));
    }
    if sites == 0 || sites > MAX_SITES {
        problems.general(format!(
            "the shots have {sites} sites; 1 to {MAX_SITES} are supported"
        ));
    }
    problems.check()?;
    let mut problems = Problems::default();
    let mut acc = ShotAccumulator::new(sites).map_err(|e| one_problem(e.to_string()))?;
    let mut row = vec![0u8; sites];
    for s in 0..n_states {
        for (i, bit) in row.iter_mut().enumerate() {
            let v = init.at2(s, i);
            *bit = bit_of(v).unwrap_or_else(|| {
                problems.lazy(None, || {
                    format!(
                        "{noun} `{}` element [{s}, {i}] is {v}; bits are 0 or 1",
                        init.name()
                    )
                });
                0
            });
        }
        acc.add_state(&row)
            .map_err(|e| one_problem(e.to_string()))?;
    }
    let mut failure: Option<ShotError> = None;
    let read = shots.blocks(sites, &mut |block, bytes| {
        for r in 0..block.rows {
            let k = block.first + r;
            let mut good = true;
            let state = block.state[r];
            let index = if state >= 0.0 && state.fract() == 0.0 && state < n_states as f64 {
                state as usize
            } else {
                problems.lazy(None, || {
                    format!(
                        "{noun} `state` element [{k}] is {state}, not a row of `init` \
                         (0 to {})",
                        n_states.saturating_sub(1)
                    )
                });
                good = false;
                0
            };
            let t = block.t[r];
            if let Err(phrase) = grid::time_value(t) {
                problems.lazy(None, || format!("{noun} `t` element [{k}] {phrase}"));
                good = false;
            }
            let meas: &[u8] = match bytes {
                Some(b) => {
                    let row_bytes = &b[r * sites..(r + 1) * sites];
                    if let Some(i) = row_bytes.iter().position(|&v| v > 1) {
                        let v = row_bytes[i];
                        problems.lazy(None, || {
                            format!("{noun} `meas` element [{k}, {i}] is {v}; bits are 0 or 1")
                        });
                        good = false;
                    }
                    row_bytes
                }
                None => {
                    for (i, bit) in row.iter_mut().enumerate() {
                        let v = block.meas[r * sites + i];
                        *bit = bit_of(v).unwrap_or_else(|| {
                            problems.lazy(None, || {
                                format!("{noun} `meas` element [{k}, {i}] is {v}; bits are 0 or 1")
                            });
                            good = false;
                            0
                        });
                    }
                    &row
                }
            };
            if good && problems.is_empty() && failure.is_none() {
                if let Err(e) = acc.add_shot(index, t, meas) {
                    failure = Some(e);
                }
            }
        }
    });
    if let Err(reason) = read {
        problems.general(reason);
    }
    if let Some(e) = failure {
        problems.general(e.to_string());
    }
    problems.check()?;
    acc.finish().map_err(|e| one_problem(e.to_string()))
}

// -------------------------------------------------------------- HDF5 -----

/// Any numeric HDF5 element as f64: integers of every size and sign,
/// floats of 4 or 8 bytes, and enums over an integer (h5py writes booleans
/// as an enum of int8).
#[derive(Debug, Clone, Copy)]
struct Number(f64);

fn numeric(dtype: &Datatype) -> Option<(bool, usize, bool, hdf5_reader::ByteOrder)> {
    // (is float, size, signed, byte order)
    match dtype {
        Datatype::FixedPoint {
            size,
            signed,
            byte_order,
        } => Some((false, usize::from(*size), *signed, *byte_order)),
        Datatype::FloatingPoint { size, byte_order } if matches!(size, 4 | 8) => {
            Some((true, usize::from(*size), true, *byte_order))
        }
        Datatype::Enum { base, .. } => numeric(base),
        _ => None,
    }
}

impl H5Type for Number {
    fn hdf5_type() -> Datatype {
        <f64 as H5Type>::hdf5_type()
    }

    fn from_bytes(bytes: &[u8], dtype: &Datatype) -> hdf5_reader::error::Result<Self> {
        let (float, size, signed, order) = numeric(dtype).ok_or_else(|| {
            hdf5_reader::error::Error::InvalidData(format!("{dtype:?} is not a number"))
        })?;
        let chunk = bytes.get(..size).ok_or_else(|| {
            hdf5_reader::error::Error::InvalidData(format!("an element needs {size} bytes"))
        })?;
        let be = order == hdf5_reader::ByteOrder::BigEndian;
        let v = match (float, size, signed) {
            (true, 4, _) => f64::from(f32::from_le_bytes(bytes_of(chunk, be))),
            (true, _, _) => f64::from_le_bytes(bytes_of(chunk, be)),
            (false, 1, true) => f64::from(chunk[0] as i8),
            (false, 1, false) => f64::from(chunk[0]),
            (false, 2, true) => f64::from(i16::from_le_bytes(bytes_of(chunk, be))),
            (false, 2, false) => f64::from(u16::from_le_bytes(bytes_of(chunk, be))),
            (false, 4, true) => f64::from(i32::from_le_bytes(bytes_of(chunk, be))),
            (false, 4, false) => f64::from(u32::from_le_bytes(bytes_of(chunk, be))),
            (false, 8, true) => i64::from_le_bytes(bytes_of(chunk, be)) as f64,
            (false, 8, false) => u64::from_le_bytes(bytes_of(chunk, be)) as f64,
            _ => {
                return Err(hdf5_reader::error::Error::InvalidData(format!(
                    "integers of {size} bytes are not supported"
                )));
            }
        };
        Ok(Self(v))
    }

    fn element_size(dtype: &Datatype) -> usize {
        hdf5_reader::dtype_element_size(dtype).unwrap_or(0)
    }
}

fn open_hdf5<B: AsRef<[u8]> + Send + Sync + 'static>(bytes: B) -> Result<Hdf5File, IngestError> {
    if !bytes.as_ref().starts_with(HDF5_MAGIC) {
        return Err(one_problem(
            "not an HDF5 file (the signature \\x89HDF\\r\\n\\x1a\\n is missing)",
        ));
    }
    Hdf5File::from_owner(bytes, hdf5_reader::OpenOptions::default())
        .map_err(|e| one_problem(format!("not a readable HDF5 file: {e}")))
}

/// A dataset by name, with its shape, checked to hold numbers.
fn dataset(
    file: &Hdf5File,
    name: &'static str,
    problems: &mut Problems,
) -> Option<(hdf5_reader::Dataset, Vec<usize>)> {
    let ds = match file.dataset(name) {
        Ok(ds) => ds,
        Err(e) => {
            problems.general(format!("dataset `{name}` cannot be opened: {e}"));
            return None;
        }
    };
    if numeric(ds.dtype()).is_none() {
        problems.general(format!(
            "dataset `{name}` has type {:?}; expected numbers or booleans",
            ds.dtype()
        ));
        return None;
    }
    let shape: Option<Vec<usize>> = ds
        .shape()
        .iter()
        .map(|&d| usize::try_from(d).ok())
        .collect();
    let Some(shape) = shape else {
        problems.general(format!("dataset `{name}` is too large"));
        return None;
    };
    Some((ds, shape))
}

fn read_all(ds: &hdf5_reader::Dataset, name: &str) -> Result<Vec<f64>, String> {
    ds.read_array::<Number>()
        .map(|a| a.iter().map(|n| n.0).collect())
        .map_err(|e| format!("dataset `{name}` cannot be read: {e}"))
}

fn read_rows(
    ds: &hdf5_reader::Dataset,
    name: &str,
    first: u64,
    end: u64,
    cols: Option<u64>,
) -> Result<Vec<f64>, String> {
    let mut selections = vec![SliceInfoElem::Slice {
        start: first,
        end,
        step: 1,
    }];
    if let Some(c) = cols {
        selections.push(SliceInfoElem::Slice {
            start: 0,
            end: c,
            step: 1,
        });
    }
    ds.read_slice::<Number>(&SliceInfo { selections })
        .map(|a| a.iter().map(|n| n.0).collect())
        .map_err(|e| format!("dataset `{name}` rows {first}..{end} cannot be read: {e}"))
}

struct Hdf5Shots {
    meas: (hdf5_reader::Dataset, Vec<usize>),
    state: (hdf5_reader::Dataset, Vec<usize>),
    t: (hdf5_reader::Dataset, Vec<usize>),
}

impl ShotSource for Hdf5Shots {
    fn shapes(&self) -> Result<((usize, usize), usize, usize), Vec<String>> {
        let mut problems = Vec::new();
        let meas = match self.meas.1.as_slice() {
            [r, c] => Some((*r, *c)),
            other => {
                problems.push(format!(
                    "dataset `meas` has shape {other:?}; expected shots × sites"
                ));
                None
            }
        };
        let mut one = |name: &str, shape: &[usize]| match shape {
            [n] => Some(*n),
            other => {
                problems.push(format!(
                    "dataset `{name}` has shape {other:?}; expected one value per shot"
                ));
                None
            }
        };
        let (s, t) = (one("state", &self.state.1), one("t", &self.t.1));
        if matches!(numeric(self.state.0.dtype()), Some((true, ..))) {
            problems.push("dataset `state` holds floats; state indices must be integers".into());
        }
        match (meas, s, t) {
            (Some(m), Some(s), Some(t)) if problems.is_empty() => Ok((m, s, t)),
            _ => Err(problems),
        }
    }

    fn noun(&self) -> &'static str {
        "dataset"
    }

    fn blocks(
        &mut self,
        sites: usize,
        each: &mut dyn FnMut(&ShotBlock, Option<&[u8]>),
    ) -> Result<(), String> {
        let shots = self.meas.1[0] as u64;
        let mut first = 0u64;
        while first < shots {
            let end = (first + HDF5_BLOCK_ROWS).min(shots);
            let block = ShotBlock {
                first: first as usize,
                rows: (end - first) as usize,
                meas: read_rows(&self.meas.0, "meas", first, end, Some(sites as u64))?,
                state: read_rows(&self.state.0, "state", first, end, None)?,
                t: read_rows(&self.t.0, "t", first, end, None)?,
            };
            each(&block, None);
            first = end;
        }
        Ok(())
    }
}

/// Parses an HDF5 shot file (datasets `init`, `meas`, `state`, `t` at the
/// root). `bytes` is any owner of the file's bytes (a `Vec<u8>`, a
/// `bytes::Bytes`), read without a copy.
///
/// # Errors
/// Every problem found, naming the dataset and index.
pub fn parse_hdf5<B: AsRef<[u8]> + Send + Sync + 'static>(
    bytes: B,
) -> Result<ShotsIngested, IngestError> {
    let file = open_hdf5(bytes)?;
    let mut problems = Problems::default();
    let init = dataset(&file, "init", &mut problems);
    let meas = dataset(&file, "meas", &mut problems);
    let state = dataset(&file, "state", &mut problems);
    let t = dataset(&file, "t", &mut problems);
    problems.check()?;
    let (Some(init), Some(meas), Some(state), Some(t)) = (init, meas, state, t) else {
        return Err(one_problem("a shot dataset is missing"));
    };
    let [states, sites] = init.1.as_slice() else {
        return Err(one_problem(format!(
            "dataset `init` has shape {:?}; expected states × sites",
            init.1
        )));
    };
    let (states, sites) = (*states, *sites);
    if states
        .checked_mul(sites)
        .is_none_or(|n| n > spreadscope_physics::model::shots::MAX_COUNTERS)
    {
        return Err(one_problem(format!(
            "dataset `init` of {states} × {sites} is too large"
        )));
    }
    let values = read_all(&init.0, "init").map_err(one_problem)?;
    let records = shots_from_arrays(
        &ArraySource::Dense {
            name: "init",
            shape: (states, sites),
            values,
        },
        &mut Hdf5Shots { meas, state, t },
    )?;
    Ok(ShotsIngested {
        notes: vec![summary_note(&records)],
        state_names: row_names(&records),
        records,
    })
}

/// State names of the array formats: the row numbers of `init`.
fn row_names(records: &ShotRecords) -> Vec<String> {
    (0..records.n_states()).map(|k| k.to_string()).collect()
}

/// Parses a correlation map stored as HDF5: `C` (times × offsets), `t`,
/// `x`, optional `err` (same shape as `C`) and optional `mask` (true =
/// present). A value that is not finite at a present point is a problem
/// (mark missing points with `mask`); errors must be finite and > 0.
///
/// # Errors
/// Every problem found, naming the dataset and index.
pub fn parse_hdf5_map<B: AsRef<[u8]> + Send + Sync + 'static>(
    bytes: B,
) -> Result<Ingested, IngestError> {
    let file = open_hdf5(bytes)?;
    let mut problems = Problems::default();
    let c = dataset(&file, "C", &mut problems);
    let t = dataset(&file, "t", &mut problems);
    let x = dataset(&file, "x", &mut problems);
    let optional = |name: &'static str, problems: &mut Problems| {
        if file.dataset(name).is_ok() {
            dataset(&file, name, problems)
        } else {
            None
        }
    };
    let err = optional("err", &mut problems);
    let mask = optional("mask", &mut problems);
    problems.check()?;
    let mut problems = Problems::default();
    let (Some(c), Some(t), Some(x)) = (c, t, x) else {
        return Err(one_problem("a map dataset is missing"));
    };
    let [rows, cols] = c.1.as_slice() else {
        return Err(one_problem(format!(
            "dataset `C` has shape {:?}; expected times × offsets",
            c.1
        )));
    };
    let (rows, cols) = (*rows, *cols);
    if rows
        .checked_mul(cols)
        .is_none_or(|n| n > grid::MAX_GRID_POINTS)
    {
        return Err(one_problem(format!(
            "dataset `C` of {rows} × {cols} exceeds the {} grid points allowed",
            grid::MAX_GRID_POINTS
        )));
    }
    for (name, shape, want) in [("t", &t.1, rows), ("x", &x.1, cols)] {
        if shape.as_slice() != [want] {
            problems.general(format!(
                "dataset `{name}` has shape {shape:?} but `C` is {rows} × {cols}"
            ));
        }
    }
    for other in [&err, &mask].into_iter().flatten() {
        if other.1.as_slice() != [rows, cols] {
            problems.general(format!(
                "dataset `{}` has shape {:?} but `C` is {rows} × {cols}",
                other.0.name().trim_start_matches('/'),
                other.1
            ));
        }
    }
    problems.check()?;
    let mut problems = Problems::default();
    let read = |d: &(hdf5_reader::Dataset, Vec<usize>), name: &str| read_all(&d.0, name);
    let values = read(&c, "C").map_err(one_problem)?;
    let times = read(&t, "t").map_err(one_problem)?;
    let offsets = read(&x, "x").map_err(one_problem)?;
    let errors = err
        .as_ref()
        .map(|e| read(e, "err"))
        .transpose()
        .map_err(one_problem)?;
    let present = mask
        .as_ref()
        .map(|m| read(m, "mask"))
        .transpose()
        .map_err(one_problem)?;

    let ts: Vec<Option<f64>> = times
        .iter()
        .enumerate()
        .map(|(i, &v)| match grid::time_value(v) {
            Ok(t) => Some(t),
            Err(phrase) => {
                problems.general(format!("dataset `t` element [{i}] ({v}) {phrase}"));
                None
            }
        })
        .collect();
    let xs: Vec<Option<i32>> = offsets
        .iter()
        .enumerate()
        .map(|(i, &v)| match grid::offset_from_f64(v) {
            Ok(x) => Some(x),
            Err(phrase) => {
                problems.general(format!("dataset `x` element [{i}] ({v}) {phrase}"));
                None
            }
        })
        .collect();
    for (later, first) in grid::repeats(ts.iter().map(|t| grid::time_repeat_key(*t))) {
        problems.general(format!(
            "dataset `t` element [{later}] repeats the time of element [{first}]"
        ));
    }
    for (later, first) in grid::repeats(xs.iter().copied()) {
        problems.general(format!(
            "dataset `x` element [{later}] repeats the offset of element [{first}]"
        ));
    }
    let mut points = Vec::new();
    for (ti, &time) in ts.iter().enumerate() {
        for (xi, &offset) in xs.iter().enumerate() {
            let k = ti * cols + xi;
            if let Some(m) = &present {
                match bit_of(m[k]) {
                    Some(0) => continue,
                    Some(_) => {}
                    None => {
                        let v = m[k];
                        problems.lazy(None, || {
                            format!("dataset `mask` element [{ti}, {xi}] is {v}, not a boolean")
                        });
                        continue;
                    }
                }
            }
            let v = values[k];
            if let Err(phrase) = grid::corr_value(v) {
                let hint = if present.is_none() {
                    " (mark missing points with a boolean `mask` dataset, true = present)"
                } else {
                    ""
                };
                problems.lazy(None, || {
                    format!("dataset `C` element [{ti}, {xi}] ({v}) {phrase}{hint}")
                });
                continue;
            }
            let e = match &errors {
                Some(errors) => match grid::error_value(errors[k]) {
                    Ok(e) => Some(e),
                    Err(phrase) => {
                        let bad = errors[k];
                        problems.lazy(None, || {
                            format!("dataset `err` element [{ti}, {xi}] ({bad}) {phrase}")
                        });
                        continue;
                    }
                },
                None => None,
            };
            if let (Some(t), Some(x)) = (time, offset) {
                points.push(Point { x, t, c: v, err: e });
            }
        }
    }
    problems.check()?;
    let mut notes = Vec::new();
    let map = grid::assemble(&points, errors.is_some(), &mut notes).map_err(one_problem)?;
    Ok(Ingested {
        map,
        meta: DatasetMeta::default(),
        notes,
    })
}

#[cfg(test)]
mod tests {
    //! Fixtures in `tests/reference/shots/` are SYNTHETIC and written by
    //! numpy 2.4.6 / h5py 3.16.0 (HDF5 2.0.0) through
    //! `tests/reference/shots/make_fixtures.py`: the same 30 shots as CSV,
    //! NPZ and two HDF5 layouts, so each reader is checked against files
    //! produced by the formats' own reference libraries.

    use std::io::{BufReader, Read};

    use ndarray::{Array1, Array2};
    use ndarray_npy::NpzWriter;
    use spreadscope_physics::model::shots::{EstimateOptions, SourceWindow, estimate};
    use spreadscope_physics::tolerance::close;

    use super::*;

    const CSV: &[u8] = include_bytes!("../../../tests/reference/shots/shots.csv");
    const NPZ: &[u8] = include_bytes!("../../../tests/reference/shots/shots.npz");
    const H5_CHUNKED: &[u8] = include_bytes!("../../../tests/reference/shots/shots_chunked.h5");
    const H5_CONTIGUOUS: &[u8] =
        include_bytes!("../../../tests/reference/shots/shots_contiguous.h5");
    const H5_BAD: &[u8] = include_bytes!("../../../tests/reference/shots/shots_bad.h5");
    const H5_MAP: &[u8] = include_bytes!("../../../tests/reference/shots/map.h5");

    fn accept(text: &str) -> ShotsIngested {
        match parse_csv(text.as_bytes()) {
            Ok(ok) => ok,
            Err(e) => panic!("expected acceptance, got {:?}", e.problems),
        }
    }

    fn refuse(text: &[u8]) -> Vec<Problem> {
        match parse_csv(text) {
            Ok(ok) => panic!("expected refusal, got {:?}", ok.records),
            Err(e) => e.problems,
        }
    }

    /// Asserts that `other` holds the same shots as the CSV fixture, with
    /// array row k standing for CSV state `s{k}`.
    fn same_as_csv(other: &ShotsIngested) {
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

    #[test]
    fn csv_fixture_is_read_with_its_counts() {
        let ok = parse_csv(CSV).expect("fixture");
        let r = &ok.records;
        assert_eq!((r.sites(), r.n_states(), r.total_shots()), (6, 5, 30));
        assert_eq!(r.times(), &[0.0, 0.5, 1.25]);
        // Line 3 of the fixture: s3,1.25,001001,111101 — state s3 was the
        // first seen, so it has index 0.
        assert_eq!(ok.state_names[0], "s3");
        assert_eq!(r.initial_bits(0), Some(&[0u8, 0, 1, 0, 0, 1][..]));
        assert!(ok.notes[0].contains("30 shots of 5 initial states at 3 times on 6 sites"));
    }

    #[test]
    fn npz_and_hdf5_fixtures_hold_the_same_shots_as_the_csv() {
        same_as_csv(&parse_npz(NPZ).expect("numpy.savez archive"));
        same_as_csv(&parse_hdf5(H5_CHUNKED.to_vec()).expect("chunked, gzip, bool meas"));
        same_as_csv(&parse_hdf5(H5_CONTIGUOUS.to_vec()).expect("contiguous, f32 times"));
        let ok = parse(NPZ, ShotFormat::Npz).expect("dispatch");
        assert!(
            ok.notes.iter().any(|n| n.contains("`generator`")),
            "{:?}",
            ok.notes
        );
        assert_eq!(ok.state_names[3], "3");
    }

    #[test]
    fn every_format_gives_the_same_estimate_and_errors_for_one_seed() {
        // The CSV numbers states by first appearance (s3 is index 0), the
        // array formats by row of `init`; the estimator must not see the
        // difference. Five replicates with seed 0 is the case that once gave
        // the array formats a bootstrap spread of zero. Values and errors
        // are compared bit for bit: the same shots must give the same
        // numbers (common practice, no source).
        let opts = EstimateOptions {
            window: SourceWindow::Single(0),
            replicates: 5,
            ..EstimateOptions::default()
        };
        let run = |ok: &ShotsIngested| estimate(&ok.records, &opts).expect("estimate");
        let csv = run(&parse_csv(CSV).expect("fixture CSV"));
        let bits = |a: &Array2<f64>| a.iter().map(|v| v.to_bits()).collect::<Vec<_>>();
        for (name, other) in [
            ("npz", parse_npz(NPZ).expect("numpy.savez archive")),
            (
                "hdf5",
                parse_hdf5(H5_CHUNKED.to_vec()).expect("chunked HDF5"),
            ),
        ] {
            let est = run(&other);
            assert_eq!(bits(est.map.values()), bits(csv.map.values()), "{name}");
            assert_eq!(
                bits(est.map.errors().expect("errors")),
                bits(csv.map.errors().expect("errors")),
                "{name}"
            );
            assert_eq!(est.warnings, csv.warnings, "{name}");
        }
        // The spread is real: no point of the CSV map is masked.
        assert!(
            csv.map.errors().expect("errors").iter().all(|&e| e > 1e-3),
            "{:?}",
            csv.map.errors()
        );
    }

    #[test]
    fn csv_header_aliases_order_delimiters_bom_and_crlf() {
        // Columns reordered under aliases, `;` delimiter, BOM, CRLF,
        // comments and blank lines; counts by hand: state a (bits 10) has
        // 2 shots at t = 0.5 reading 10 and 11 → ups (2, 1).
        let text = "\u{feff}# synthetic\r\nmeas;Time;STATE;initial\r\n\r\n10;0.5;a;10\r\n\
                    11;0.5;a;10\r\n01;0.5;b;01\r\n# end\r\n";
        let ok = accept(text);
        let r = &ok.records;
        assert_eq!((r.sites(), r.n_states(), r.total_shots()), (2, 2, 3));
        assert_eq!(r.counts(0, 0), Some((2, &[2u32, 1][..])));
        assert_eq!(ok.state_names, vec!["a".to_string(), "b".to_string()]);
        // No header: the documented column order; tabs; quoted cells.
        let ok = accept("\"x\"\t0\t\"0011\"\t0111\nx\t2.5e-1\t0011\t0011\n");
        assert_eq!(ok.records.times(), &[0.0, 0.25]);
    }

    #[test]
    fn every_bad_row_kind_is_refused_with_its_line() {
        let text = "state_id,t,init_bits,meas_bits\n\
                    a,0,0101,0101\n\
                    a,0.5,0101\n\
                    a,0.5,0101,0101,9\n\
                    b,0.5,01x1,0101\n\
                    b,0.5,0101,012\n\
                    c,0.5,010,0101\n\
                    c,0.5,0101,01011\n\
                    d,inf,0101,0101\n\
                    d,nan,0101,0101\n\
                    d,-1,0101,0101\n\
                    d,soon,0101,0101\n\
                    ,0.5,0101,0101\n\
                    a,1.0,1101,0101\n";
        let problems = refuse(text.as_bytes());
        let got: Vec<(Option<usize>, &str)> = problems
            .iter()
            .map(|p| (p.line, p.reason.as_str()))
            .collect();
        let want_prefix: [(usize, &str); 13] = [
            (3, "missing fields: expected 4 fields, found 3"),
            (4, "extra fields: expected 4 fields, found 5"),
            (5, "init_bits `01x1` has `x` at position 3; bits are 0 or 1"),
            (6, "meas_bits `012` has `2` at position 3"),
            (
                7,
                "init_bits has 3 bits but the first data row (line 2) has 4",
            ),
            (
                8,
                "meas_bits has 5 bits but the first data row (line 2) has 4",
            ),
            (9, "t `inf` is not a finite number"),
            (10, "t `nan` is not a finite number"),
            (11, "t `-1` is negative"),
            (12, "t `soon` is not a number"),
            (13, "state_id is empty"),
            (
                14,
                "state `a` has initial bits 1101 here but 0101 on line 2",
            ),
            (0, ""),
        ];
        assert_eq!(got.len(), 12, "{got:#?}");
        for ((line, reason), (want_line, prefix)) in got.iter().zip(want_prefix) {
            assert_eq!(*line, Some(want_line), "{reason}");
            assert!(reason.starts_with(prefix), "line {want_line}: {reason}");
        }
    }

    #[test]
    fn header_text_and_size_problems_are_named() {
        let problems = refuse(b"state,t,bits,weight\na,0,01,01\n");
        assert_eq!(problems[0].line, Some(1));
        assert!(
            problems[0].reason.contains("unknown column `weight`"),
            "{problems:?}"
        );
        assert!(
            problems[1].reason.contains("no `init_bits` column"),
            "{problems:?}"
        );
        assert!(refuse(b"")[0].reason.contains("empty"));
        assert!(refuse(b"# only a comment\n\n")[0].reason.contains("empty"));
        assert!(
            refuse(b"state_id,t,init_bits,meas_bits\n")[0]
                .reason
                .contains("no shot rows")
        );
        let problems = refuse(b"a,0,01,01\nb,0,\xff1,01\n");
        assert_eq!(problems[0].line, Some(2));
        assert!(problems[0].reason.contains("UTF-8"));
        // Leading zeros dropped by a spreadsheet get a hint.
        let problems = refuse(b"a,0,0101,0101\nb,0,101,0101\n");
        assert!(problems[0].reason.contains("leading zeros"), "{problems:?}");
    }

    #[test]
    fn an_overlong_line_is_skipped_and_named() {
        let mut text = b"a,0,01,01\nb,0,".to_vec();
        text.extend(std::iter::repeat_n(b'0', MAX_LINE_BYTES + 10));
        text.extend(b",01\nc,0,10,10\n");
        let problems = refuse(&text);
        assert_eq!(problems.len(), 1, "{problems:?}");
        assert_eq!(problems[0].line, Some(2));
        assert!(problems[0].reason.contains("longer than"));
    }

    #[test]
    fn problems_are_capped_with_a_count_of_the_rest() {
        let mut text = String::from("a,0,01,01\n");
        for _ in 0..250 {
            text.push_str("a,0,01,0x\n");
        }
        let problems = refuse(text.as_bytes());
        assert_eq!(problems.len(), super::super::MAX_PROBLEMS);
        // 250 bad rows, 99 listed with their lines: 151 more.
        assert_eq!(problems[98].line, Some(100));
        assert_eq!(problems[99].reason, "…and 151 more problems");
    }

    /// A reader that writes `rows` CSV shot rows on demand, never holding
    /// more than one row: 8 states × 4 times on 12 sites.
    struct Generated {
        rows: usize,
        next: usize,
        pending: Vec<u8>,
    }

    impl Read for Generated {
        fn read(&mut self, out: &mut [u8]) -> std::io::Result<usize> {
            if self.pending.is_empty() {
                if self.next == self.rows {
                    return Ok(0);
                }
                let k = self.next;
                let (state, time) = (k % 8, (k / 8) % 4);
                let init: String = (0..12)
                    .map(|i| {
                        if (state >> (i % 3)) & 1 == 1 {
                            '1'
                        } else {
                            '0'
                        }
                    })
                    .collect();
                let meas: String = (0..12)
                    .map(|i| if (k + i) % 3 == 0 { '1' } else { '0' })
                    .collect();
                self.pending =
                    format!("s{state},{},{init},{meas}\n", time as f64 * 0.5).into_bytes();
                self.next += 1;
            }
            let n = out.len().min(self.pending.len());
            out[..n].copy_from_slice(&self.pending[..n]);
            self.pending.drain(..n);
            Ok(n)
        }
    }

    #[test]
    fn streamed_input_keeps_counters_per_state_time_and_site_only() {
        // 32 rows or 200 000 rows of the same 8 states × 4 times: the
        // records hold 8 · 4 · 12 counters either way.
        for rows in [32, 200_000] {
            let reader = BufReader::with_capacity(
                4096,
                Generated {
                    rows,
                    next: 0,
                    pending: Vec::new(),
                },
            );
            let ok = parse_csv(reader).expect("generated rows are valid");
            assert_eq!(ok.records.total_shots(), rows as u64);
            assert_eq!(ok.records.counter_len(), 8 * 4 * 12);
        }
    }

    #[test]
    fn parsed_csv_feeds_the_estimator() {
        // The hand-made example of the estimator's own tests, as CSV:
        // numpy 2.4.6 np.cov(X[:, 0], S[:, 1], ddof=1)[0, 1] = −0.9.
        let text = "state_id,t,init_bits,meas_bits\n\
                    p,1.5,00,10\np,1.5,00,00\nq,1.5,01,01\n\
                    r,1.5,10,11\nr,1.5,10,10\nr,1.5,10,11\n\
                    u,1.5,11,00\nu,1.5,11,01\n\
                    v,1.5,10,10\nv,1.5,10,10\nv,1.5,10,00\nv,1.5,10,11\n";
        let ok = accept(text);
        let est = estimate(
            &ok.records,
            &EstimateOptions {
                window: SourceWindow::Single(1),
                ..EstimateOptions::default()
            },
        )
        .expect("estimate");
        assert!(close(est.pairs.values[(0, 0, 1)], -0.9, 1e-13, 0.0));
        // x = −1 from source 1 is C_01.
        let xi = est.map.column_of(-1).expect("x = −1");
        assert!(close(est.map.values()[(0, xi)], -0.9, 1e-13, 0.0));
    }

    fn npz(build: impl FnOnce(&mut NpzWriter<Cursor<Vec<u8>>>)) -> Vec<u8> {
        let mut w = NpzWriter::new(Cursor::new(Vec::new()));
        build(&mut w);
        w.finish().expect("in-memory archive").into_inner()
    }

    fn refuse_npz(bytes: &[u8]) -> Vec<String> {
        match parse_npz(bytes) {
            Ok(ok) => panic!("expected refusal, got {:?}", ok.records),
            Err(e) => e.problems.into_iter().map(|p| p.reason).collect(),
        }
    }

    #[test]
    fn npz_problems_name_array_and_index() {
        // Arrays written by ndarray-npy's NpzWriter (NumPy NEP 1 format).
        let init = Array2::<u8>::from_shape_vec((2, 3), vec![0, 1, 0, 1, 1, 0]).expect("shape");
        let mut meas = Array2::<u8>::zeros((4, 3));
        meas[(2, 1)] = 3;
        let state = Array1::from(vec![0i64, 1, 5, 0]);
        let t = Array1::from(vec![0.0, 0.5, 0.5, -1.0]);
        let bytes = npz(|w| {
            w.add_array("init", &init).expect("init");
            w.add_array("meas", &meas).expect("meas");
            w.add_array("state", &state).expect("state");
            w.add_array("t", &t).expect("t");
        });
        let reasons = refuse_npz(&bytes);
        assert_eq!(reasons.len(), 3, "{reasons:?}");
        assert_eq!(
            reasons[0],
            "array `state` element [2] is 5, not a row of `init` (0 to 1)"
        );
        assert_eq!(
            reasons[1],
            "array `meas` element [2, 1] is 3; bits are 0 or 1"
        );
        assert_eq!(
            reasons[2],
            "array `t` element [3] is negative (times must be ≥ 0)"
        );

        // Structure: a missing array, mismatched lengths and sites.
        let bytes = npz(|w| {
            w.add_array("init", &Array2::<u8>::zeros((2, 4)))
                .expect("init");
            w.add_array("meas", &Array2::<u8>::zeros((3, 3)))
                .expect("meas");
            w.add_array("state", &Array1::from(vec![0i64, 1]))
                .expect("state");
        });
        let reasons = refuse_npz(&bytes);
        assert!(
            reasons[0].starts_with("the archive has no array `t`"),
            "{reasons:?}"
        );
        let bytes = npz(|w| {
            w.add_array("init", &Array2::<u8>::zeros((2, 4)))
                .expect("init");
            w.add_array("meas", &Array2::<u8>::zeros((3, 3)))
                .expect("meas");
            w.add_array("state", &Array1::from(vec![0i64, 1]))
                .expect("state");
            w.add_array("t", &Array1::from(vec![0.0, 1.0, 2.0]))
                .expect("t");
        });
        let reasons = refuse_npz(&bytes);
        assert_eq!(
            reasons[0],
            "array `init` has 4 sites per state but `meas` has 3 per shot"
        );
        assert_eq!(
            reasons[1],
            "array `state` has 2 entries but `meas` has 3 shots"
        );
        assert!(refuse_npz(b"PK\x03\x04garbage")[0].contains("not a readable NPZ"));
    }

    #[test]
    fn hdf5_problems_name_dataset_and_index() {
        // shots_bad.h5: init[2, 3] = 5, meas[4, 1] = 2, state[6] = 9,
        // t[7] = −0.5 (make_fixtures.py).
        let problems = match parse_hdf5(H5_BAD.to_vec()) {
            Ok(ok) => panic!("expected refusal, got {:?}", ok.records),
            Err(e) => e.problems,
        };
        let reasons: Vec<&str> = problems.iter().map(|p| p.reason.as_str()).collect();
        assert_eq!(
            reasons,
            vec![
                "dataset `init` element [2, 3] is 5; bits are 0 or 1",
                "dataset `meas` element [4, 1] is 2; bits are 0 or 1",
                "dataset `state` element [6] is 9, not a row of `init` (0 to 4)",
                "dataset `t` element [7] is negative (times must be ≥ 0)",
            ]
        );
        let err = parse_hdf5(b"not hdf5 at all".to_vec()).expect_err("no signature");
        assert!(err.problems[0].reason.contains("not an HDF5 file"));
        // An HDF5 file without the shot datasets names each missing one.
        let err = parse_hdf5(H5_MAP.to_vec()).expect_err("a map, not shots");
        assert!(
            err.problems[0].reason.contains("`init`"),
            "{:?}",
            err.problems
        );
    }

    #[test]
    fn hdf5_map_is_read_with_mask_and_errors() {
        // map.h5 (make_fixtures.py): C at t = 1 is [0.05, 0.2, 0.5, 0.2,
        // 0.05]; C[2, 4] is NaN and masked out; err = 0.01 everywhere.
        let ok = parse_hdf5_map(H5_MAP.to_vec()).expect("map");
        let map = &ok.map;
        assert_eq!(map.offsets(), &[-2, -1, 0, 1, 2]);
        assert_eq!(map.times(), &[0.0, 1.0, 2.0]);
        assert_eq!(map.get(1, 2), Some((0.5, Some(0.01))));
        assert_eq!(map.get(2, 4), None);
        assert_eq!(map.n_missing(), 1);
        assert!(
            ok.notes
                .iter()
                .any(|n| n.contains("1 of 15 grid points missing"))
        );
        let err = parse_hdf5_map(H5_CHUNKED.to_vec()).expect_err("shots, not a map");
        assert!(err.problems.iter().any(|p| p.reason.contains("`C`")));
    }

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

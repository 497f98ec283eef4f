//! NPY and NPZ correlation maps.
//!
//! - NPZ (an uncompressed zip of `.npy` members, as `numpy.savez` writes):
//!   arrays `C` (times × sites, float64 or float32), `t` (times), `x`
//!   (offsets, integer or integral float), optional `err` (same shape as `C`)
//!   and optional `mask` (bool, same shape, true = present). Array names take
//!   the CSV column aliases. A NaN in `C` at a present point is a problem;
//!   missing points are marked by `mask`. Compressed archives
//!   (`numpy.savez_compressed`) are refused with a sentence saying so.
//! - NPY: one 2-D float array (times × sites); its axes come from the
//!   request ([`IngestOptions`]), and their absence is a problem naming the
//!   request parameter.
//!
//! This file is the one reader of NPY and NPZ containers, for correlation
//! maps and shot records alike ([`read_view`], [`npz_views`]; the shot
//! layouts use them from `shots`). It is written here over the byte slice
//! (NumPy NEP 1, "A simple file format for NumPy arrays", versions 1.0–3.0)
//! so that every length in a header is checked against the bytes actually
//! present before anything is allocated: a forged header cannot make the
//! server reserve memory it never received. This is security code: a fix to
//! it lands once, for every caller. Supported dtypes: float64/32, signed and
//! unsigned integers of 1–8 bytes, bool; either byte order; C or Fortran
//! order. Map members are copied out through the zip reader (its CRC check
//! included) and capped at the largest permitted grid; shot members are read
//! in place. Problems name the array and index, never a line. Knows nothing
//! of the file system or HTTP.

use std::io::{Cursor, Read};

use super::grid::{self, Point};
use super::{IngestError, IngestOptions, Ingested, Problems, Role};
use crate::dataset::DatasetMeta;

/// The NPY magic string (NumPy NEP 1, "A simple file format for NumPy arrays").
pub(super) const NPY_MAGIC: &[u8] = b"\x93NUMPY";

/// The most bytes read from one archive member of a correlation map: the
/// largest permitted grid in float64 plus room for the header.
const MAX_MEMBER_BYTES: u64 = (grid::MAX_GRID_POINTS as u64) * 8 + (1 << 20);

/// The element kinds of NumPy dtypes this reader decodes.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(super) enum Kind {
    Float,
    Int,
    UInt,
    Bool,
}

/// A checked `.npy` image: its header, and its data bytes in place. Every
/// length in the header has been checked against the bytes present, so
/// every index below `element_count()` is in the data.
#[derive(Debug)]
pub(super) struct NpyView<'a> {
    pub(super) descr: String,
    pub(super) kind: Kind,
    size: usize,
    big_endian: bool,
    fortran: bool,
    pub(super) shape: Vec<usize>,
    data: &'a [u8],
}

impl<'a> NpyView<'a> {
    /// Element `index` in memory order as f64 (a bool as its byte: 0 or 1
    /// when well formed, so that another byte can still be reported).
    /// Integers beyond 2^53 lose precision, which only matters for values
    /// refused later anyway.
    pub(super) fn at(&self, index: usize) -> Option<f64> {
        let start = index.checked_mul(self.size)?;
        let chunk = self.data.get(start..start.checked_add(self.size)?)?;
        Some(decode(self.kind, self.size, self.big_endian, chunk))
    }

    /// Element `(i, j)` of a 2-D array in either memory order.
    pub(super) fn at2(&self, i: usize, j: usize) -> Option<f64> {
        let (rows, cols) = self.dim2()?;
        if i >= rows || j >= cols {
            return None;
        }
        self.at(if self.fortran {
            j.checked_mul(rows)?.checked_add(i)?
        } else {
            i.checked_mul(cols)?.checked_add(j)?
        })
    }

    /// The number of elements (the data hold exactly this many).
    pub(super) fn element_count(&self) -> usize {
        self.data.len() / self.size
    }

    /// `(rows, cols)` of a 2-D array.
    pub(super) fn dim2(&self) -> Option<(usize, usize)> {
        match self.shape.as_slice() {
            [r, c] => Some((*r, *c)),
            _ => None,
        }
    }

    /// The length of a 1-D array.
    pub(super) fn len1(&self) -> Option<usize> {
        match self.shape.as_slice() {
            [n] => Some(*n),
            _ => None,
        }
    }

    /// The rows `first..first + rows` of a C-ordered array of unsigned or
    /// boolean bytes, in place; `None` for other layouts.
    pub(super) fn byte_rows(&self, first: usize, rows: usize, cols: usize) -> Option<&'a [u8]> {
        if self.size != 1 || self.fortran || !matches!(self.kind, Kind::UInt | Kind::Bool) {
            return None;
        }
        let start = first.checked_mul(cols)?;
        let end = first.checked_add(rows)?.checked_mul(cols)?;
        self.data.get(start..end)
    }
}

/// A decoded array: every element as f64 (a bool as its byte), in file order.
#[derive(Debug)]
struct NpyArray {
    descr: String,
    kind: Kind,
    shape: Vec<usize>,
    fortran: bool,
    data: Vec<f64>,
}

impl NpyArray {
    fn decoded(view: &NpyView) -> Self {
        Self {
            descr: view.descr.clone(),
            kind: view.kind,
            shape: view.shape.clone(),
            fortran: view.fortran,
            data: (0..view.element_count())
                .map(|k| view.at(k).unwrap_or(f64::NAN))
                .collect(),
        }
    }

    /// Element `(i, j)` of a 2-D array in either memory order.
    fn at2(&self, i: usize, j: usize) -> Option<f64> {
        let (&rows, &cols) = (self.shape.first()?, self.shape.get(1)?);
        if i >= rows || j >= cols {
            return None;
        }
        let index = if self.fortran {
            j.checked_mul(rows)?.checked_add(i)?
        } else {
            i.checked_mul(cols)?.checked_add(j)?
        };
        self.data.get(index).copied()
    }

    fn shape_text(&self) -> String {
        let dims: Vec<String> = self.shape.iter().map(usize::to_string).collect();
        format!("({})", dims.join(", "))
    }

    /// `(rows, cols)` of a 2-D array.
    fn dim2(&self) -> Option<(usize, usize)> {
        match self.shape.as_slice() {
            [r, c] => Some((*r, *c)),
            _ => None,
        }
    }
}

/// A little reader of the Python literal in an NPY header, e.g.
/// `{'descr': '<f8', 'fortran_order': False, 'shape': (3, 4), }`.
struct Literal<'a> {
    text: &'a [u8],
    pos: usize,
}

#[derive(Debug)]
enum PyValue {
    Str(String),
    Bool(bool),
    Tuple(Vec<usize>),
}

impl Literal<'_> {
    fn skip_space(&mut self) {
        while self.text.get(self.pos).is_some_and(u8::is_ascii_whitespace) {
            self.pos += 1;
        }
    }

    fn peek(&mut self) -> Option<u8> {
        self.skip_space();
        self.text.get(self.pos).copied()
    }

    fn expect(&mut self, byte: u8) -> Result<(), String> {
        if self.peek() == Some(byte) {
            self.pos += 1;
            Ok(())
        } else {
            Err(format!(
                "expected `{}` at header position {}",
                char::from(byte),
                self.pos
            ))
        }
    }

    fn string(&mut self) -> Result<String, String> {
        let quote = self.peek().filter(|q| *q == b'\'' || *q == b'"');
        let Some(quote) = quote else {
            return Err(format!(
                "expected a quoted string at header position {}",
                self.pos
            ));
        };
        let start = self.pos + 1;
        let len = self
            .text
            .get(start..)
            .and_then(|rest| rest.iter().position(|&b| b == quote))
            .ok_or("unterminated string in the header")?;
        let bytes = self.text.get(start..start + len).unwrap_or_default();
        self.pos = start + len + 1;
        String::from_utf8(bytes.to_vec()).map_err(|_| "the header is not UTF-8".to_string())
    }

    fn word(&mut self, word: &str) -> bool {
        self.skip_space();
        let end = self.pos + word.len();
        if self.text.get(self.pos..end) == Some(word.as_bytes()) {
            self.pos = end;
            true
        } else {
            false
        }
    }

    fn tuple(&mut self) -> Result<Vec<usize>, String> {
        self.expect(b'(')?;
        let mut dims = Vec::new();
        loop {
            match self.peek() {
                Some(b')') => {
                    self.pos += 1;
                    return Ok(dims);
                }
                Some(b) if b.is_ascii_digit() => {
                    let start = self.pos;
                    while self.text.get(self.pos).is_some_and(u8::is_ascii_digit) {
                        self.pos += 1;
                    }
                    let digits = self.text.get(start..self.pos).unwrap_or_default();
                    let dim = std::str::from_utf8(digits)
                        .ok()
                        .and_then(|d| d.parse::<usize>().ok())
                        .ok_or("a dimension of the shape is too large")?;
                    dims.push(dim);
                    // Python 2 wrote long integers with an `L` suffix.
                    if self.text.get(self.pos) == Some(&b'L') {
                        self.pos += 1;
                    }
                    if self.peek() == Some(b',') {
                        self.pos += 1;
                    }
                }
                _ => return Err("the shape is not a tuple of whole numbers".into()),
            }
        }
    }

    fn value(&mut self) -> Result<PyValue, String> {
        match self.peek() {
            Some(b'\'' | b'"') => self.string().map(PyValue::Str),
            Some(b'(') => self.tuple().map(PyValue::Tuple),
            _ if self.word("True") => Ok(PyValue::Bool(true)),
            _ if self.word("False") => Ok(PyValue::Bool(false)),
            Some(b'[') => Err("structured dtypes are not supported".into()),
            _ => Err(format!("unreadable header value at position {}", self.pos)),
        }
    }

    /// The header dictionary as (key, value) pairs.
    fn dict(&mut self) -> Result<Vec<(String, PyValue)>, String> {
        self.expect(b'{')?;
        let mut entries = Vec::new();
        loop {
            if self.peek() == Some(b'}') {
                self.pos += 1;
                break;
            }
            let key = self.string()?;
            self.expect(b':')?;
            let value = self.value()?;
            entries.push((key, value));
            match self.peek() {
                Some(b',') => self.pos += 1,
                Some(b'}') => {}
                _ => {
                    return Err(format!(
                        "expected `,` or `}}` at header position {}",
                        self.pos
                    ));
                }
            }
        }
        if self.peek().is_some() {
            return Err("unexpected text after the header dictionary".into());
        }
        Ok(entries)
    }
}

/// The first `N` bytes of a chunk as an array (zero-padded if shorter).
fn bytes_of<const N: usize>(chunk: &[u8]) -> [u8; N] {
    let mut out = [0u8; N];
    for (o, b) in out.iter_mut().zip(chunk) {
        *o = *b;
    }
    out
}

/// Decodes one element stored with `size` bytes in the given byte order.
pub(super) fn decode(kind: Kind, size: usize, big_endian: bool, chunk: &[u8]) -> f64 {
    // Bring the bytes to little-endian order, then read them natively.
    let mut le = [0u8; 8];
    for (o, b) in le.iter_mut().zip(chunk) {
        *o = *b;
    }
    if let Some(used) = le.get_mut(..size).filter(|_| big_endian) {
        used.reverse();
    }
    match (kind, size) {
        (Kind::Float, 4) => f64::from(f32::from_le_bytes(bytes_of::<4>(&le))),
        (Kind::Float, _) => f64::from_le_bytes(bytes_of::<8>(&le)),
        (Kind::Int, 1) => f64::from(i8::from_le_bytes(bytes_of::<1>(&le))),
        (Kind::Int, 2) => f64::from(i16::from_le_bytes(bytes_of::<2>(&le))),
        (Kind::Int, 4) => f64::from(i32::from_le_bytes(bytes_of::<4>(&le))),
        // Offsets and times beyond 2^53 lose precision here; such values
        // are refused later (offsets) or are far beyond any real time axis.
        (Kind::Int, _) => i64::from_le_bytes(bytes_of::<8>(&le)) as f64,
        (Kind::UInt | Kind::Bool, 1) => f64::from(u8::from_le_bytes(bytes_of::<1>(&le))),
        (Kind::UInt, 2) => f64::from(u16::from_le_bytes(bytes_of::<2>(&le))),
        (Kind::UInt, 4) => f64::from(u32::from_le_bytes(bytes_of::<4>(&le))),
        (Kind::UInt | Kind::Bool, _) => u64::from_le_bytes(bytes_of::<8>(&le)) as f64,
    }
}

/// The kind, item size and byte order of a dtype string such as `<f8`.
fn dtype(descr: &str) -> Option<(Kind, usize, bool)> {
    let mut chars = descr.chars();
    let (order, rest) = match chars.next()? {
        c @ ('<' | '>' | '|' | '=') => (c, chars.as_str()),
        _ => ('=', descr),
    };
    let big_endian = order == '>' || (order == '=' && cfg!(target_endian = "big"));
    let kind = match rest.get(..1)? {
        "f" => Kind::Float,
        "i" => Kind::Int,
        "u" => Kind::UInt,
        "b" => Kind::Bool,
        _ => return None,
    };
    let size: usize = rest.get(1..)?.parse().ok()?;
    match (kind, size) {
        (Kind::Float, 4 | 8) | (Kind::Int | Kind::UInt, 1 | 2 | 4 | 8) | (Kind::Bool, 1) => {
            Some((kind, size, big_endian))
        }
        _ => None,
    }
}

/// Reads one `.npy` image in place, checking every length in its header
/// against the bytes present before anything is allocated. `max_elements`
/// caps the element count when the caller will copy the data. The error
/// is a sentence without the array's name.
pub(super) fn read_view(bytes: &[u8], max_elements: Option<usize>) -> Result<NpyView<'_>, String> {
    let rest = bytes
        .strip_prefix(NPY_MAGIC)
        .ok_or("not an NPY array (the magic string \\x93NUMPY is missing)")?;
    let (major, minor) = match rest {
        [major, minor, ..] => (*major, *minor),
        _ => return Err("the NPY header is truncated".into()),
    };
    let (header_len, header_start) = match (major, rest.get(2..)) {
        (1, Some([a, b, ..])) => (usize::from(u16::from_le_bytes([*a, *b])), 4),
        (2 | 3, Some([a, b, c, d, ..])) => {
            let len = u32::from_le_bytes([*a, *b, *c, *d]);
            (
                usize::try_from(len).map_err(|_| "the NPY header is too long")?,
                6,
            )
        }
        (1..=3, _) => return Err("the NPY header is truncated".into()),
        _ => return Err(format!("NPY version {major}.{minor} is not supported")),
    };
    let header_end =
        usize::checked_add(header_start, header_len).ok_or("the NPY header is too long")?;
    let header = rest
        .get(header_start..header_end)
        .ok_or("the NPY header is truncated")?;
    let data = rest.get(header_end..).unwrap_or_default();
    let entries = Literal {
        text: header,
        pos: 0,
    }
    .dict()
    .map_err(|e| format!("unreadable NPY header: {e}"))?;
    let (mut descr, mut fortran, mut shape) = (None, None, None);
    for (key, value) in entries {
        match (key.as_str(), value) {
            ("descr", PyValue::Str(s)) => descr = Some(s),
            ("fortran_order", PyValue::Bool(b)) => fortran = Some(b),
            ("shape", PyValue::Tuple(dims)) => shape = Some(dims),
            (other, value) => {
                return Err(format!("unexpected NPY header entry `{other}`: {value:?}"));
            }
        }
    }
    let (Some(descr), Some(fortran), Some(shape)) = (descr, fortran, shape) else {
        return Err("the NPY header lacks `descr`, `fortran_order` or `shape`".into());
    };
    let (kind, size, big_endian) = dtype(&descr).ok_or_else(|| {
        format!("dtype `{descr}` is not supported (expected float64/32, an integer type or bool)")
    })?;
    let elements = shape.iter().try_fold(1usize, |n, &d| n.checked_mul(d));
    let elements = match (elements, max_elements) {
        (Some(n), Some(max)) if n <= max => n,
        (_, Some(max)) => {
            return Err(format!(
                "shape {shape:?} holds more than the {max} elements allowed"
            ));
        }
        (Some(n), None) => n,
        (None, None) => return Err(format!("shape {shape:?} is too large")),
    };
    let needed = elements
        .checked_mul(size)
        .ok_or_else(|| format!("shape {shape:?} is too large"))?;
    if data.len() < needed {
        return Err(format!(
            "the data are truncated: {} bytes where shape {shape:?} of `{descr}` needs {needed}",
            data.len()
        ));
    }
    if data.len() > needed {
        return Err(format!(
            "{} bytes follow the data that shape {shape:?} of `{descr}` describes",
            data.len() - needed
        ));
    }
    Ok(NpyView {
        descr,
        kind,
        size,
        big_endian,
        fortran,
        shape,
        data,
    })
}

/// Reads one `.npy` image of a correlation map into memory (bounded by the
/// largest permitted grid).
fn read_array(bytes: &[u8]) -> Result<NpyArray, String> {
    read_view(bytes, Some(grid::MAX_GRID_POINTS)).map(|view| NpyArray::decoded(&view))
}

// ------------------------------------------------------ NPZ archives -----

/// The opening of an NPZ archive shared by maps and shots: every member is
/// named by its stem (the name without `.npy`); members `wanted` refuses are
/// returned as ignored (`` `stem` `` each); a compressed wanted member is a
/// problem; `each` receives the open zip entry of every other member.
/// An open member of an NPZ archive held in memory.
type NpzMember<'z, 'a> = zip::read::ZipFile<'z, Cursor<&'a [u8]>>;

fn npz_entries<'a>(
    bytes: &'a [u8],
    wanted: &dyn Fn(&str) -> bool,
    problems: &mut Problems,
    each: &mut dyn FnMut(&mut NpzMember<'_, 'a>, String, &mut Problems),
) -> Result<Vec<String>, String> {
    let mut archive = zip::ZipArchive::new(Cursor::new(bytes))
        .map_err(|e| format!("not a readable NPZ (zip) archive: {e}"))?;
    let mut ignored = Vec::new();
    for index in 0..archive.len() {
        let mut entry = match archive.by_index(index) {
            Ok(entry) => entry,
            Err(e) => {
                problems.general(format!("archive member {index} cannot be read: {e}"));
                continue;
            }
        };
        let name = entry.name().to_string();
        let stem = name.strip_suffix(".npy").unwrap_or(&name).to_string();
        if !wanted(&stem) {
            ignored.push(format!("`{stem}`"));
            continue;
        }
        if entry.compression() != zip::CompressionMethod::Stored {
            problems.general(format!(
                "array `{stem}` is compressed ({}); only uncompressed archives are read: \
                 save with numpy.savez, not numpy.savez_compressed",
                entry.compression()
            ));
            continue;
        }
        each(&mut entry, stem, problems);
    }
    Ok(ignored)
}

/// The members of an NPZ archive of a correlation map, each copied out
/// through the zip reader (which checks its CRC) and bounded by the largest
/// permitted grid, then read by [`read_array`]. Returns the ignored stems.
fn npz_map_members(
    bytes: &[u8],
    wanted: &dyn Fn(&str) -> bool,
    problems: &mut Problems,
    each: &mut dyn FnMut(String, NpyArray, &mut Problems),
) -> Result<Vec<String>, String> {
    npz_entries(bytes, wanted, problems, &mut |entry, stem, problems| {
        let mut buf = Vec::new();
        if let Err(e) = entry
            .by_ref()
            .take(MAX_MEMBER_BYTES + 1)
            .read_to_end(&mut buf)
        {
            problems.general(format!(
                "array `{stem}` cannot be read from the archive: {e}"
            ));
            return;
        }
        if buf.len() as u64 > MAX_MEMBER_BYTES {
            problems.general(format!(
                "array `{stem}` is larger than the {} elements allowed",
                grid::MAX_GRID_POINTS
            ));
            return;
        }
        match read_array(&buf) {
            Ok(array) => each(stem, array, problems),
            Err(reason) => problems.general(format!("array `{stem}`: {reason}")),
        }
    })
}

/// The members of an NPZ archive read in place, without a copy (shot
/// archives, whose `meas` member may be far larger than any map), each
/// checked by [`read_view`]. Returns the ignored stems.
pub(super) fn npz_views<'a>(
    bytes: &'a [u8],
    wanted: &dyn Fn(&str) -> bool,
    problems: &mut Problems,
    each: &mut dyn FnMut(String, NpyView<'a>, &mut Problems),
) -> Result<Vec<String>, String> {
    npz_entries(bytes, wanted, problems, &mut |entry, stem, problems| {
        // A stored member's data lie in place in the archive.
        let start = usize::try_from(entry.data_start()).unwrap_or(usize::MAX);
        let len = usize::try_from(entry.compressed_size()).unwrap_or(usize::MAX);
        let Some(member) = start.checked_add(len).and_then(|end| bytes.get(start..end)) else {
            problems.general(format!("array `{stem}` is truncated in the archive"));
            return;
        };
        match read_view(member, None) {
            Ok(view) => each(stem, view, problems),
            Err(reason) => problems.general(format!("array `{stem}`: {reason}")),
        }
    })
}

/// The arrays an NPZ may hold besides the four shared roles.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Member {
    Role(Role),
    Mask,
}

impl Member {
    fn of(name: &str) -> Option<Self> {
        match name.trim().to_lowercase().as_str() {
            "mask" | "present" => Some(Self::Mask),
            _ => Role::of(name).map(Self::Role),
        }
    }

    fn slot(self) -> usize {
        match self {
            Self::Role(Role::Offset) => 0,
            Self::Role(Role::Time) => 1,
            Self::Role(Role::Value) => 2,
            Self::Role(Role::Error) => 3,
            Self::Mask => 4,
        }
    }
}

/// A named array of an NPZ (or the bare NPY, named "array").
#[derive(Debug)]
struct Named {
    name: String,
    array: NpyArray,
}

/// Checks the offsets of a 1-D array: integral, in range, not repeated.
fn offsets_from(values: &[f64], name: &str, problems: &mut Problems) -> Vec<Option<i32>> {
    let mut out: Vec<Option<i32>> = values
        .iter()
        .enumerate()
        .map(|(i, &v)| {
            grid::offset_from_f64(v)
                .map_err(|phrase| problems.lazy(None, || format!("`{name}[{i}]`: {v} {phrase}")))
                .ok()
        })
        .collect();
    for (later, first) in grid::repeats(out.iter().copied()) {
        problems.general(format!(
            "`{name}[{later}]` repeats the value of `{name}[{first}]`"
        ));
        if let Some(slot) = out.get_mut(later) {
            *slot = None;
        }
    }
    out
}

/// Checks the times of a 1-D array: finite, ≥ 0, not repeated.
fn times_from(values: &[f64], name: &str, problems: &mut Problems) -> Vec<Option<f64>> {
    let mut out: Vec<Option<f64>> = values
        .iter()
        .enumerate()
        .map(|(i, &v)| {
            grid::time_value(v)
                .map_err(|phrase| problems.lazy(None, || format!("`{name}[{i}]`: {v} {phrase}")))
                .ok()
        })
        .collect();
    for (later, first) in grid::repeats(out.iter().map(|t| grid::time_repeat_key(*t))) {
        problems.general(format!(
            "`{name}[{later}]` repeats the value of `{name}[{first}]`"
        ));
        if let Some(slot) = out.get_mut(later) {
            *slot = None;
        }
    }
    out
}

/// Checks that `a` is a float matrix of `shape` (when known).
fn check_matrix(a: &Named, shape: Option<(usize, usize)>, problems: &mut Problems) -> bool {
    let mut ok = true;
    if a.array.kind != Kind::Float {
        problems.general(format!(
            "array `{}` has dtype `{}`; expected float64 or float32",
            a.name, a.array.descr
        ));
        ok = false;
    }
    match (a.array.dim2(), shape) {
        (None, _) => {
            problems.general(format!(
                "array `{}` must be 2-D (times × sites), found shape {}",
                a.name,
                a.array.shape_text()
            ));
            ok = false;
        }
        (Some(got), Some(want)) if got != want => {
            problems.general(format!(
                "array `{}` has shape {} but the axes make {} times × {} sites{}",
                a.name,
                a.array.shape_text(),
                want.0,
                want.1,
                transposed_hint(got, want)
            ));
            ok = false;
        }
        _ => {}
    }
    ok
}

/// Checks that `a` is a 1-D numeric axis; its values when it is.
fn axis_values<'a>(a: &'a Named, what: &str, problems: &mut Problems) -> Option<&'a [f64]> {
    if a.array.kind == Kind::Bool {
        problems.general(format!(
            "array `{}` ({what}) is boolean; expected numbers",
            a.name
        ));
        return None;
    }
    if a.array.shape.len() != 1 {
        problems.general(format!(
            "array `{}` ({what}) must be 1-D, found shape {}",
            a.name,
            a.array.shape_text()
        ));
        return None;
    }
    if a.array.data.is_empty() {
        problems.general(format!("array `{}` ({what}) is empty", a.name));
        return None;
    }
    Some(&a.array.data)
}

/// The checked points of a dense map: C at every present grid point (all
/// points without a mask), with its error when given.
fn dense_points(
    c: &Named,
    err: Option<&Named>,
    mask: Option<&Named>,
    xs: &[Option<i32>],
    ts: &[Option<f64>],
    hint: &str,
    problems: &mut Problems,
) -> Vec<Point> {
    let Some((n_t, n_x)) = c.array.dim2() else {
        return Vec::new();
    };
    let mut points = Vec::new();
    for i in 0..n_t {
        for j in 0..n_x {
            let present = mask.map_or(Some(true), |m| m.array.at2(i, j).map(|v| v != 0.0));
            if present != Some(true) {
                continue;
            }
            let Some(raw) = c.array.at2(i, j) else {
                continue;
            };
            let value = grid::corr_value(raw).map_err(|phrase| {
                problems.lazy(None, || {
                    format!("`{}[{i}, {j}]`: {raw} {phrase}{hint}", c.name)
                });
            });
            let error = match err {
                None => Ok(None),
                Some(e) => match e.array.at2(i, j) {
                    None => Err(()),
                    Some(raw) => grid::error_value(raw).map(Some).map_err(|phrase| {
                        problems.lazy(None, || format!("`{}[{i}, {j}]`: {raw} {phrase}", e.name));
                    }),
                },
            };
            if let (Ok(c), Ok(err), Some(Some(x)), Some(Some(t))) =
                (value, error, xs.get(j), ts.get(i))
            {
                points.push(Point {
                    x: *x,
                    t: *t,
                    c,
                    err,
                });
            }
        }
    }
    points
}

/// A hint when a matrix has the axes' lengths the other way round.
fn transposed_hint(got: (usize, usize), want: (usize, usize)) -> &'static str {
    if got == (want.1, want.0) {
        " (it looks transposed: store it as times × sites)"
    } else {
        ""
    }
}

fn into_error(reason: String) -> IngestError {
    let mut p = Problems::default();
    p.general(reason);
    p.into_error()
}

/// Parses an NPZ archive. See the module documentation.
pub(super) fn parse_npz(bytes: &[u8]) -> Result<Ingested, IngestError> {
    let mut problems = Problems::default();
    let mut slots: [Option<Named>; 5] = [None, None, None, None, None];
    let ignored = npz_map_members(
        bytes,
        &|stem| Member::of(stem).is_some(),
        &mut problems,
        &mut |stem, array, problems| {
            let Some(member) = Member::of(&stem) else {
                return;
            };
            match slots.get_mut(member.slot()) {
                Some(Some(first)) => problems.general(format!(
                    "arrays `{}` and `{stem}` play the same part; keep one",
                    first.name
                )),
                Some(slot) => *slot = Some(Named { name: stem, array }),
                None => {}
            }
        },
    )
    .map_err(into_error)?;
    let [x, t, c, err, mask] = slots;
    let mut notes = Vec::new();
    if !ignored.is_empty() {
        notes.push(format!(
            "ignored arrays not understood: {}",
            ignored.join(", ")
        ));
    }
    for (slot, what) in [
        (x.is_none(), "`x` (site offsets)"),
        (t.is_none(), "`t` (times)"),
        (c.is_none(), "`C` (times × sites)"),
    ] {
        if slot {
            problems.general(format!("the archive has no array {what}"));
        }
    }
    let xs = x
        .as_ref()
        .and_then(|a| axis_values(a, "site offsets", &mut problems).map(|v| (a, v)))
        .map(|(a, v)| offsets_from(v, &a.name, &mut problems));
    let ts = t
        .as_ref()
        .and_then(|a| axis_values(a, "times", &mut problems).map(|v| (a, v)))
        .map(|(a, v)| times_from(v, &a.name, &mut problems));
    let want = xs
        .as_ref()
        .zip(ts.as_ref())
        .map(|(xs, ts)| (ts.len(), xs.len()));
    let mut points = Vec::new();
    if let Some(c) = &c {
        let mut ok = check_matrix(c, want, &mut problems);
        let shape = c.array.dim2();
        if let Some(e) = &err {
            ok &= check_matrix(e, shape, &mut problems);
        }
        if let Some(m) = &mask {
            if m.array.kind != Kind::Bool {
                problems.general(format!(
                    "array `{}` has dtype `{}`; the mask must be boolean (true = present)",
                    m.name, m.array.descr
                ));
                ok = false;
            }
            if m.array.dim2().is_none() || m.array.dim2() != shape {
                problems.general(format!(
                    "array `{}` has shape {} but `{}` has {}",
                    m.name,
                    m.array.shape_text(),
                    c.name,
                    c.array.shape_text()
                ));
                ok = false;
            }
        }
        if ok {
            if let (Some(xs), Some(ts)) = (&xs, &ts) {
                let hint = if mask.is_none() {
                    " (mark missing points with a boolean `mask` array, true = present)"
                } else {
                    ""
                };
                points = dense_points(c, err.as_ref(), mask.as_ref(), xs, ts, hint, &mut problems);
            }
        }
    }
    problems.check()?;
    let map = grid::assemble(&points, err.is_some(), &mut notes).map_err(into_error)?;
    Ok(Ingested {
        map,
        meta: DatasetMeta::default(),
        notes,
    })
}

/// Parses a bare NPY array with axes from the request. See the module
/// documentation.
pub(super) fn parse_npy(bytes: &[u8], options: &IngestOptions) -> Result<Ingested, IngestError> {
    let mut problems = Problems::default();
    let array = read_array(bytes).map_err(|reason| problems.general(format!("NPY: {reason}")));
    if options.x.is_none() {
        problems.general(
            "request parameter `x` is needed: a bare NPY array carries no site offsets \
             (e.g. x=-5:5 or x=0,1,2)",
        );
    }
    if options.t.is_none() {
        problems.general(
            "request parameter `t` is needed: a bare NPY array carries no times \
             (e.g. t=0,0.5,1)",
        );
    }
    let xs = options.x.as_ref().map(|x| {
        let values: Vec<f64> = x.iter().copied().map(f64::from).collect();
        offsets_from(&values, "request parameter x", &mut problems)
    });
    let ts = options
        .t
        .as_ref()
        .map(|t| times_from(t, "request parameter t", &mut problems));
    let mut points = Vec::new();
    if let Ok(array) = array {
        let named = Named {
            name: "array".into(),
            array,
        };
        let want = xs
            .as_ref()
            .zip(ts.as_ref())
            .map(|(xs, ts)| (ts.len(), xs.len()));
        if check_matrix(&named, want, &mut problems) {
            if let (Some(xs), Some(ts)) = (&xs, &ts) {
                let hint = " (a bare NPY array cannot mark missing points: send NPZ with a \
                            `mask` array or JSON with null)";
                points = dense_points(&named, None, None, xs, ts, hint, &mut problems);
            }
        }
    }
    problems.check()?;
    let mut notes = Vec::new();
    let map = grid::assemble(&points, false, &mut notes).map_err(into_error)?;
    Ok(Ingested {
        map,
        meta: DatasetMeta::default(),
        notes,
    })
}

#[cfg(test)]
mod tests;

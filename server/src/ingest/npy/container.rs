//! The one bounded reader of NPY images and NPZ archives (see the module
//! documentation of `npy`): headers parsed and every length checked against
//! the bytes present before anything is allocated, dtypes decoded, archive
//! members listed and read in place or copied out under a cap.

use std::io::Cursor;

use crate::ingest::{Problems, grid};

/// The NPY magic string (NumPy NEP 1, "A simple file format for NumPy arrays").
pub(in crate::ingest) const NPY_MAGIC: &[u8] = b"\x93NUMPY";

/// The most bytes read from one archive member of a correlation map: the
/// largest permitted grid in float64 plus room for the header.
pub(super) const MAX_MEMBER_BYTES: u64 = (grid::MAX_GRID_POINTS as u64) * 8 + (1 << 20);

/// The element kinds of NumPy dtypes this reader decodes.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(in crate::ingest) enum Kind {
    Float,
    Int,
    UInt,
    Bool,
}

/// A checked `.npy` image: its header, and its data bytes in place. Every
/// length in the header has been checked against the bytes present, so
/// every index below `element_count()` is in the data.
#[derive(Debug)]
pub(in crate::ingest) struct NpyView<'a> {
    pub(in crate::ingest) descr: String,
    pub(in crate::ingest) kind: Kind,
    size: usize,
    big_endian: bool,
    fortran: bool,
    pub(in crate::ingest) shape: Vec<usize>,
    data: &'a [u8],
}

impl<'a> NpyView<'a> {
    /// Element `index` in memory order as f64 (a bool as its byte: 0 or 1
    /// when well formed, so that another byte can still be reported).
    /// Integers beyond 2^53 lose precision, which only matters for values
    /// refused later anyway.
    pub(in crate::ingest) fn at(&self, index: usize) -> Option<f64> {
        let start = index.checked_mul(self.size)?;
        let chunk = self.data.get(start..start.checked_add(self.size)?)?;
        Some(decode(self.kind, self.size, self.big_endian, chunk))
    }

    /// Element `(i, j)` of a 2-D array in either memory order.
    pub(in crate::ingest) fn at2(&self, i: usize, j: usize) -> Option<f64> {
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
    pub(in crate::ingest) fn element_count(&self) -> usize {
        self.data.len() / self.size
    }

    /// `(rows, cols)` of a 2-D array.
    pub(in crate::ingest) fn dim2(&self) -> Option<(usize, usize)> {
        match self.shape.as_slice() {
            [r, c] => Some((*r, *c)),
            _ => None,
        }
    }

    /// The length of a 1-D array.
    pub(in crate::ingest) fn len1(&self) -> Option<usize> {
        match self.shape.as_slice() {
            [n] => Some(*n),
            _ => None,
        }
    }

    /// The rows `first..first + rows` of a C-ordered array of unsigned or
    /// boolean bytes, in place; `None` for other layouts.
    pub(in crate::ingest) fn byte_rows(
        &self,
        first: usize,
        rows: usize,
        cols: usize,
    ) -> Option<&'a [u8]> {
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
pub(super) struct NpyArray {
    pub(super) descr: String,
    pub(super) kind: Kind,
    pub(super) shape: Vec<usize>,
    pub(super) fortran: bool,
    pub(super) data: Vec<f64>,
}

impl NpyArray {
    pub(super) fn decoded(view: &NpyView) -> Self {
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
    pub(super) fn at2(&self, i: usize, j: usize) -> Option<f64> {
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

    pub(super) fn shape_text(&self) -> String {
        let dims: Vec<String> = self.shape.iter().map(usize::to_string).collect();
        format!("({})", dims.join(", "))
    }

    /// `(rows, cols)` of a 2-D array.
    pub(super) fn dim2(&self) -> Option<(usize, usize)> {
        match self.shape.as_slice() {
            [r, c] => Some((*r, *c)),
            _ => None,
        }
    }
}

/// A little reader of the Python literal in an NPY header, e.g.
/// `{'descr': '<f8', 'fortran_order': False, 'shape': (3, 4), }`.
pub(super) struct Literal<'a> {
    text: &'a [u8],
    pos: usize,
}

#[derive(Debug)]
pub(super) enum PyValue {
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
pub(super) fn bytes_of<const N: usize>(chunk: &[u8]) -> [u8; N] {
    let mut out = [0u8; N];
    for (o, b) in out.iter_mut().zip(chunk) {
        *o = *b;
    }
    out
}

/// Decodes one element stored with `size` bytes in the given byte order.
pub(in crate::ingest) fn decode(kind: Kind, size: usize, big_endian: bool, chunk: &[u8]) -> f64 {
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
pub(super) fn dtype(descr: &str) -> Option<(Kind, usize, bool)> {
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
pub(in crate::ingest) fn read_view(
    bytes: &[u8],
    max_elements: Option<usize>,
) -> Result<NpyView<'_>, String> {
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
pub(super) fn read_array(bytes: &[u8]) -> Result<NpyArray, String> {
    read_view(bytes, Some(grid::MAX_GRID_POINTS)).map(|view| NpyArray::decoded(&view))
}

// ------------------------------------------------------ NPZ archives -----

/// The opening of an NPZ archive shared by maps and shots: every member is
/// named by its stem (the name without `.npy`); members `wanted` refuses are
/// returned as ignored (`` `stem` `` each); a compressed wanted member is a
/// problem; `each` receives the open zip entry of every other member.
/// An open member of an NPZ archive held in memory.
pub(super) type NpzMember<'z, 'a> = zip::read::ZipFile<'z, Cursor<&'a [u8]>>;

pub(super) fn npz_entries<'a>(
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

/// The members of an NPZ archive read in place, without a copy (shot
/// archives, whose `meas` member may be far larger than any map), each
/// checked by [`read_view`]. Returns the ignored stems.
pub(in crate::ingest) fn npz_views<'a>(
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

//! The one HDF5 reader of the ingest layer, for correlation maps and shot
//! records alike: the file signature, opening a file through the pure-Rust
//! `hdf5-reader` crate (contiguous or chunked datasets, gzip/shuffle
//! filters), numeric elements of every integer and float type decoded as
//! f64 (through the NPY element decoder, so a byte order or width is
//! handled once), datasets by name with their shapes, whole reads and
//! reads of row blocks. The shot layout over it lives in `shots`; the map
//! layout is here ([`parse_hdf5_map`]).
//!
//! HDF5 correlation maps: datasets `C` (times × offsets), `t`, `x` and
//! optional `err` and `mask` (true = present), with the rules of the NPZ map
//! reader, returning the same [`Ingested`] as [`super::parse`]. Problems
//! name the dataset and index. Knows no file system or HTTP.

use hdf5_reader::{Datatype, H5Type, Hdf5File, SliceInfo, SliceInfoElem};

use super::grid::{self, Point};
use super::npy::{self, Kind};
use super::{IngestError, Ingested, Problem, Problems};
use crate::dataset::DatasetMeta;

/// The HDF5 format signature (HDF5 File Format Specification, §II.A).
pub(super) const HDF5_MAGIC: &[u8] = b"\x89HDF\r\n\x1a\n";

fn one_problem(reason: impl Into<String>) -> IngestError {
    IngestError {
        problems: vec![Problem {
            line: None,
            reason: reason.into(),
        }],
    }
}

/// Any numeric HDF5 element as f64: integers of every size and sign,
/// floats of 4 or 8 bytes, and enums over an integer (h5py writes booleans
/// as an enum of int8).
#[derive(Debug, Clone, Copy)]
pub(super) struct Number(f64);

pub(super) fn numeric(dtype: &Datatype) -> Option<(bool, usize, bool, hdf5_reader::ByteOrder)> {
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
        let kind = match (float, size, signed) {
            (true, 4 | 8, _) => Kind::Float,
            (false, 1 | 2 | 4 | 8, true) => Kind::Int,
            (false, 1 | 2 | 4 | 8, false) => Kind::UInt,
            _ => {
                return Err(hdf5_reader::error::Error::InvalidData(format!(
                    "integers of {size} bytes are not supported"
                )));
            }
        };
        let v = npy::decode(kind, size, be, chunk);
        Ok(Self(v))
    }

    fn element_size(dtype: &Datatype) -> usize {
        hdf5_reader::dtype_element_size(dtype).unwrap_or(0)
    }
}

pub(super) fn open_hdf5<B: AsRef<[u8]> + Send + Sync + 'static>(
    bytes: B,
) -> Result<Hdf5File, IngestError> {
    if !bytes.as_ref().starts_with(HDF5_MAGIC) {
        return Err(one_problem(
            "not an HDF5 file (the signature \\x89HDF\\r\\n\\x1a\\n is missing)",
        ));
    }
    Hdf5File::from_owner(bytes, hdf5_reader::OpenOptions::default())
        .map_err(|e| one_problem(format!("not a readable HDF5 file: {e}")))
}

/// A dataset by name, with its shape, checked to hold numbers.
pub(super) fn dataset(
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

pub(super) fn read_all(ds: &hdf5_reader::Dataset, name: &str) -> Result<Vec<f64>, String> {
    ds.read_array::<Number>()
        .map(|a| a.iter().map(|n| n.0).collect())
        .map_err(|e| format!("dataset `{name}` cannot be read: {e}"))
}

pub(super) fn read_rows(
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
                match grid::bit_value(m[k]) {
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
    //! `map.h5` is SYNTHETIC, written by h5py through
    //! `tests/reference/shots/make_fixtures.py`.

    use super::*;

    const H5_MAP: &[u8] = include_bytes!("../../../tests/reference/shots/map.h5");
    const H5_CHUNKED: &[u8] = include_bytes!("../../../tests/reference/shots/shots_chunked.h5");

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
}

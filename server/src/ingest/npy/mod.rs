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
//! `container.rs` is the one reader of NPY and NPZ containers, for correlation
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

mod container;

use container::*;
pub(super) use container::{Kind, NPY_MAGIC, NpyView, decode, npz_views};

use std::io::Read;

use super::grid::{self, Point};
use super::{IngestError, IngestOptions, Ingested, Problems, Role};
use crate::dataset::DatasetMeta;

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

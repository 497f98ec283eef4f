//! Shared by every ingest format: the checks a single offset, time, value or
//! error must pass, and the assembly of scattered points into the grid of a
//! [`CorrelationMap`] (sorted union of distinct offsets and times, missing
//! points masked). Knows nothing of any file layout, line numbers or paths;
//! callers wrap the returned reasons with the place they came from.

use std::collections::HashMap;
use std::collections::hash_map::Entry;

use ndarray::Array2;
use spreadscope_physics::CorrelationMap;

/// The most grid cells (times × offsets) a map may span. Scattered long-format
/// points with many distinct offsets and times could otherwise ask for a grid
/// quadratically larger than the file; 2^24 cells cost about 290 MB with
/// errors, far above any measured or simulated map.
pub const MAX_GRID_POINTS: usize = 1 << 24;

/// Two distinct times closer than this relative difference are almost surely
/// one time written with different rounding; they stay distinct, with a note.
const NEAR_TIME_REL: f64 = 1e-9;

/// One given point of C(x,t), already checked.
#[derive(Debug, Clone, Copy)]
pub(super) struct Point {
    pub x: i32,
    pub t: f64,
    pub c: f64,
    pub err: Option<f64>,
}

/// An integer site offset from a number: integral and inside the range of
/// `i32`. The error is a phrase to follow the value in a message.
pub(super) fn offset_from_f64(v: f64) -> Result<i32, &'static str> {
    if !v.is_finite() {
        return Err("is not a finite number");
    }
    if v.fract() != 0.0 {
        return Err("is not an integer site offset");
    }
    if v < f64::from(i32::MIN) || v > f64::from(i32::MAX) {
        return Err("is outside the range of site offsets");
    }
    // Integral and in range, so the conversion is exact.
    Ok(v as i32)
}

/// An integer site offset from text: `3`, `-3`, `+3` and `3.0` are accepted,
/// `3.5` is not. The error is a sentence fragment quoting the text.
pub(super) fn offset_from_text(text: &str) -> Result<i32, String> {
    if let Ok(v) = text.parse::<i64>() {
        return i32::try_from(v)
            .map_err(|_| format!("`{text}` is outside the range of site offsets"));
    }
    let v = number_from_text(text)?;
    offset_from_f64(v).map_err(|phrase| format!("`{text}` {phrase}"))
}

/// A number from text, with the reason when it is not one. Overflowing
/// literals such as `1e400` parse to infinity and are refused by the checks
/// below, never silently kept.
pub(super) fn number_from_text(text: &str) -> Result<f64, String> {
    if text.is_empty() {
        return Err("is empty".into());
    }
    text.parse::<f64>().map_err(|_| {
        // Spreadsheets in some locales write 0,5 for 0.5; say so rather
        // than guess, since a comma may also be a stray delimiter.
        if text.contains(',') && text.replace(',', ".").parse::<f64>().is_ok() {
            format!("`{text}` is not a number (write decimals with a point, not a comma)")
        } else {
            format!("`{text}` is not a number")
        }
    })
}

/// A time: finite and ≥ 0. A negative zero becomes +0 so that both spellings
/// name the same grid time. The error is a phrase to follow the value.
pub(super) fn time_value(v: f64) -> Result<f64, &'static str> {
    if !v.is_finite() {
        return Err("is not a finite number");
    }
    if v < 0.0 {
        return Err("is negative (times must be ≥ 0)");
    }
    Ok(v + 0.0)
}

/// A correlation value: finite. The error is a phrase to follow the value.
pub(super) fn corr_value(v: f64) -> Result<f64, &'static str> {
    if v.is_finite() {
        Ok(v)
    } else {
        Err("is not a finite number")
    }
}

/// A one-sigma error: finite and > 0. The error is a phrase to follow the
/// value.
pub(super) fn error_value(v: f64) -> Result<f64, &'static str> {
    if !v.is_finite() {
        return Err("is not a finite number");
    }
    if v <= 0.0 {
        return Err("is not positive (one-sigma errors must be > 0)");
    }
    Ok(v)
}

/// Text → number → `check`, with a fragment quoting the text on failure.
pub(super) fn checked_from_text(
    text: &str,
    check: fn(f64) -> Result<f64, &'static str>,
) -> Result<f64, String> {
    let v = number_from_text(text)?;
    check(v).map_err(|phrase| format!("`{text}` {phrase}"))
}

/// The exact identity of a time for equality: its bit pattern, with −0
/// already normalised by [`time_value`].
fn time_key(t: f64) -> u64 {
    t.to_bits()
}

/// Remembers where each (x, t) was first given, to name both places of a
/// duplicate.
#[derive(Debug)]
pub(super) struct Seen<L> {
    first: HashMap<(i32, u64), L>,
}

impl<L: Copy> Seen<L> {
    pub(super) fn new() -> Self {
        Self {
            first: HashMap::new(),
        }
    }

    /// Records (x, t) at `place`; returns the earlier place if it was seen.
    pub(super) fn insert(&mut self, x: i32, t: f64, place: L) -> Option<L> {
        match self.first.entry((x, time_key(t))) {
            Entry::Occupied(e) => Some(*e.get()),
            Entry::Vacant(e) => {
                e.insert(place);
                None
            }
        }
    }
}

/// Finds repeated entries of an axis: for every index after the first
/// occurrence of its value, the index of that first occurrence.
pub(super) fn repeats<K: std::hash::Hash + Eq>(
    keys: impl IntoIterator<Item = Option<K>>,
) -> Vec<(usize, usize)> {
    let mut first = HashMap::new();
    let mut out = Vec::new();
    for (index, key) in keys.into_iter().enumerate() {
        if let Some(key) = key {
            match first.entry(key) {
                Entry::Occupied(e) => out.push((index, *e.get())),
                Entry::Vacant(e) => {
                    e.insert(index);
                }
            }
        }
    }
    out
}

/// The key of a time for [`repeats`].
pub(super) fn time_repeat_key(t: Option<f64>) -> Option<u64> {
    t.map(time_key)
}

/// Builds the map from distinct points: the grid is the sorted union of the
/// offsets and times present; points not given are masked out (never filled)
/// and counted in a note, and near-equal times get a note.
///
/// # Errors
/// A sentence when there is no point, when the grid would exceed
/// [`MAX_GRID_POINTS`] cells, or (not expected after the checks above) when
/// the map's own invariant refuses the arrays.
pub(super) fn assemble(
    points: &[Point],
    with_errors: bool,
    notes: &mut Vec<String>,
) -> Result<CorrelationMap, String> {
    if points.is_empty() {
        return Err("no data points: every grid point is missing".into());
    }
    let mut xs: Vec<i32> = points.iter().map(|p| p.x).collect();
    xs.sort_unstable();
    xs.dedup();
    let mut ts: Vec<f64> = points.iter().map(|p| p.t).collect();
    ts.sort_unstable_by(f64::total_cmp);
    ts.dedup_by_key(|t| time_key(*t));
    let cells = ts
        .len()
        .checked_mul(xs.len())
        .filter(|&n| n <= MAX_GRID_POINTS)
        .ok_or_else(|| {
            format!(
                "the points span {} distinct times × {} distinct offsets, more than the \
                 {MAX_GRID_POINTS} grid points allowed (is a column mislabelled?)",
                ts.len(),
                xs.len()
            )
        })?;
    let dim = (ts.len(), xs.len());
    let mut values = Array2::zeros(dim);
    let mut errors = with_errors.then(|| Array2::zeros(dim));
    let mut present = Array2::from_elem(dim, false);
    for p in points {
        let (Ok(xi), Ok(ti)) = (
            xs.binary_search(&p.x),
            ts.binary_search_by(|t| t.total_cmp(&p.t)),
        ) else {
            continue;
        };
        if let Some(slot) = present.get_mut((ti, xi)) {
            *slot = true;
        }
        if let Some(slot) = values.get_mut((ti, xi)) {
            *slot = p.c;
        }
        if let (Some(e), Some(err)) = (errors.as_mut(), p.err) {
            if let Some(slot) = e.get_mut((ti, xi)) {
                *slot = err;
            }
        }
    }
    let missing = present.iter().filter(|&&p| !p).count();
    if missing > 0 {
        notes.push(format!(
            "{missing} of {cells} grid points missing ({} times × {} offsets); \
             they are masked out, never filled",
            ts.len(),
            xs.len()
        ));
    }
    let near: Vec<(f64, f64)> = ts
        .windows(2)
        .filter_map(|w| match w {
            [a, b] if (b - a) <= NEAR_TIME_REL * b.abs() => Some((*a, *b)),
            _ => None,
        })
        .collect();
    if let Some((a, b)) = near.first() {
        notes.push(format!(
            "{} pair(s) of times differ only by rounding, e.g. {a} and {b}; they are kept \
             as distinct times (round the times upstream if they are meant to be equal)",
            near.len()
        ));
    }
    CorrelationMap::new(xs, ts, values, errors, present).map_err(|e| e.to_string())
}

/// A bit value from an array: exactly 0 or 1.
pub(super) fn bit_value(v: f64) -> Option<u8> {
    if v.to_bits() == 0f64.to_bits() || v.to_bits() == (-0f64).to_bits() {
        Some(0)
    } else if v.to_bits() == 1f64.to_bits() {
        Some(1)
    } else {
        None
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn offsets_must_be_integers_in_range() {
        assert_eq!(offset_from_text("3"), Ok(3));
        assert_eq!(offset_from_text("+3"), Ok(3));
        assert_eq!(offset_from_text("-3.0"), Ok(-3));
        assert!(offset_from_text("3.5").is_err());
        assert!(offset_from_text("abc").is_err());
        assert!(offset_from_text("").is_err());
        // i32::MAX + 1 = 2147483648 (two's complement 32-bit range).
        assert!(offset_from_text("2147483648").is_err());
        assert!(offset_from_f64(f64::NAN).is_err());
    }

    #[test]
    fn values_times_and_errors_are_checked() {
        // "1e400" exceeds the binary64 maximum ≈ 1.798e308 (IEEE 754) and
        // parses to infinity.
        let overflow = number_from_text("1e400").expect("parses");
        assert!(corr_value(overflow).is_err());
        assert!(time_value(-0.5).is_err());
        assert!(time_value(-0.0).is_ok_and(|t| t.is_sign_positive()));
        assert!(error_value(0.0).is_err());
        assert!(error_value(-1.0).is_err());
        assert!(error_value(f64::INFINITY).is_err());
    }

    #[test]
    fn assemble_masks_missing_points_and_notes_them() {
        let points = [
            Point {
                x: 1,
                t: 0.5,
                c: 0.25,
                err: None,
            },
            Point {
                x: -1,
                t: 0.0,
                c: 0.0,
                err: None,
            },
            Point {
                x: 0,
                t: 0.0,
                c: 1.0,
                err: None,
            },
        ];
        let mut notes = Vec::new();
        let map = assemble(&points, false, &mut notes).expect("valid");
        assert_eq!(map.offsets(), &[-1, 0, 1]);
        assert_eq!(map.n_times(), 2);
        // 2 times × 3 offsets = 6 cells, 3 given.
        assert_eq!(map.n_missing(), 3);
        assert!(
            notes[0].starts_with("3 of 6 grid points missing"),
            "{notes:?}"
        );
        assert!(super::super::testing::cell(&map, 1, 2, 0.25, None));
        assert_eq!(map.get(1, 0), None);
    }

    #[test]
    fn near_equal_times_stay_distinct_with_a_note() {
        let points = [
            Point {
                x: 0,
                t: 0.1,
                c: 1.0,
                err: None,
            },
            Point {
                x: 0,
                t: 0.100_000_000_000_1,
                c: 1.0,
                err: None,
            },
        ];
        let mut notes = Vec::new();
        let map = assemble(&points, false, &mut notes).expect("valid");
        assert_eq!(map.n_times(), 2);
        assert!(notes.iter().any(|n| n.contains("rounding")), "{notes:?}");
    }

    #[test]
    fn repeats_name_first_occurrence() {
        assert_eq!(
            repeats([Some(1), Some(2), Some(1), None, Some(2)]),
            vec![(2, 0), (4, 1)]
        );
    }
}

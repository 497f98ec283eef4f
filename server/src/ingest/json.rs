//! JSON correlation maps:
//! `{"x": [offsets], "t": [times], "C": [[…]], "err": [[…]], "meta": {…}}`.
//!
//! `C` and the optional `err` are times × sites (`C[i][j]` is time `t[i]`,
//! offset `x[j]`); `null` in `C` is a missing point. The keys take the same
//! tolerant names as CSV columns (`site`, `time`, `corr`, `sigma`, … in any
//! case); unknown keys are ignored with a note. `meta` holds
//! [`DatasetMeta`] fields. Unsorted axes are accepted (the grid is sorted);
//! repeated entries of an axis are problems.
//!
//! Problems name the JSON path (`C[3][7]`); syntax errors carry the line
//! reported by serde_json, whose nesting limit (128 levels) turns absurdly
//! deep input into a syntax problem rather than a stack overflow. Knows
//! nothing of other formats, the file system or HTTP.

use serde_json::Value;

use super::grid::{self, Point};
use super::{BOM, IngestError, Ingested, Problems, Role};
use crate::dataset::DatasetMeta;

/// One cell of `C` or `err` after its checks.
#[derive(Debug, Clone, Copy)]
enum Cell {
    Missing,
    Given(f64),
    /// Refused (the problem is already recorded).
    Bad,
}

/// How a JSON value is described in messages.
fn kind(v: &Value) -> &'static str {
    match v {
        Value::Null => "null",
        Value::Bool(_) => "a boolean",
        Value::Number(_) => "a number",
        Value::String(_) => "a string",
        Value::Array(_) => "an array",
        Value::Object(_) => "an object",
    }
}

fn offset(v: &Value) -> Result<i32, String> {
    let Value::Number(n) = v else {
        return Err(format!("expected an integer offset, found {}", kind(v)));
    };
    if let Some(i) = n.as_i64() {
        return i32::try_from(i).map_err(|_| format!("{i} is outside the range of site offsets"));
    }
    let f = n.as_f64().unwrap_or(f64::NAN);
    grid::offset_from_f64(f).map_err(|phrase| format!("{n} {phrase}"))
}

fn time(v: &Value) -> Result<f64, String> {
    let Value::Number(n) = v else {
        return Err(format!("expected a time, found {}", kind(v)));
    };
    let f = n.as_f64().unwrap_or(f64::NAN);
    grid::time_value(f).map_err(|phrase| format!("{n} {phrase}"))
}

/// Reads an axis array: one entry per element, `None` where refused or
/// repeated (each with a problem).
fn axis<T: Copy, K: std::hash::Hash + Eq>(
    key: &str,
    value: &Value,
    convert: fn(&Value) -> Result<T, String>,
    repeat_key: fn(T) -> K,
    problems: &mut Problems,
) -> Option<Vec<Option<T>>> {
    let Value::Array(items) = value else {
        problems.general(format!("`{key}` must be an array, found {}", kind(value)));
        return None;
    };
    if items.is_empty() {
        problems.general(format!("`{key}` is empty"));
        return None;
    }
    let mut out: Vec<Option<T>> = items
        .iter()
        .enumerate()
        .map(|(i, item)| {
            convert(item)
                .map_err(|r| problems.general(format!("`{key}[{i}]`: {r}")))
                .ok()
        })
        .collect();
    for (later, first) in grid::repeats(out.iter().map(|v| v.map(repeat_key))) {
        problems.general(format!(
            "`{key}[{later}]` repeats the value of `{key}[{first}]`"
        ));
        if let Some(slot) = out.get_mut(later) {
            *slot = None;
        }
    }
    Some(out)
}

/// Reads a times × sites matrix of numbers or nulls, checking each number
/// with `check` and the shape against the axes' lengths when known.
fn matrix(
    key: &str,
    value: &Value,
    dims: (Option<usize>, Option<usize>),
    check: fn(f64) -> Result<f64, &'static str>,
    problems: &mut Problems,
) -> Option<Vec<Vec<Cell>>> {
    let Value::Array(rows) = value else {
        problems.general(format!(
            "`{key}` must be an array of rows (times × sites), found {}",
            kind(value)
        ));
        return None;
    };
    if let Some(n_t) = dims.0.filter(|&n| n != rows.len()) {
        problems.general(format!(
            "`{key}` has {} row(s) but the time axis has {n_t} entries (`{key}` is times × sites)",
            rows.len()
        ));
    }
    let mut out = Vec::with_capacity(rows.len());
    for (i, row) in rows.iter().enumerate() {
        let Value::Array(cells) = row else {
            problems.general(format!(
                "`{key}[{i}]` must be an array, found {}",
                kind(row)
            ));
            out.push(Vec::new());
            continue;
        };
        if let Some(n_x) = dims.1.filter(|&n| n != cells.len()) {
            problems.general(format!(
                "`{key}[{i}]` has {} entries but the offset axis has {n_x}",
                cells.len()
            ));
        }
        let checked = cells
            .iter()
            .enumerate()
            .map(|(j, cell)| match cell {
                Value::Null => Cell::Missing,
                Value::Number(n) => match check(n.as_f64().unwrap_or(f64::NAN)) {
                    Ok(v) => Cell::Given(v),
                    Err(phrase) => {
                        problems.general(format!("`{key}[{i}][{j}]`: {n} {phrase}"));
                        Cell::Bad
                    }
                },
                other => {
                    problems.general(format!(
                        "`{key}[{i}][{j}]`: expected a number or null, found {}",
                        kind(other)
                    ));
                    Cell::Bad
                }
            })
            .collect();
        out.push(checked);
    }
    Some(out)
}

/// Parses a JSON map. See the module documentation.
pub(super) fn parse(bytes: &[u8]) -> Result<Ingested, IngestError> {
    let mut problems = Problems::default();
    let text = bytes.strip_prefix(BOM).unwrap_or(bytes);
    if text.iter().all(u8::is_ascii_whitespace) {
        problems.general("the file is empty");
        return Err(problems.into_error());
    }
    let root: Value = match serde_json::from_slice(text) {
        Ok(root) => root,
        Err(e) => {
            let line = (e.line() > 0).then_some(e.line());
            problems.push(line, format!("not valid JSON: {e}"));
            return Err(problems.into_error());
        }
    };
    let Value::Object(object) = root else {
        problems.general(format!(
            "the top level must be an object with keys `x`, `t`, `C` (optionally `err`, \
             `meta`), found {}",
            kind(&root)
        ));
        return Err(problems.into_error());
    };

    let mut slots: [Option<(String, Value)>; 4] = [None, None, None, None];
    let mut meta_value = None;
    let mut ignored = Vec::new();
    for (key, value) in object {
        if key == "meta" {
            meta_value = Some(value);
            continue;
        }
        let Some(role) = Role::of(&key) else {
            ignored.push(format!("`{key}`"));
            continue;
        };
        let slot = match role {
            Role::Offset => &mut slots[0],
            Role::Time => &mut slots[1],
            Role::Value => &mut slots[2],
            Role::Error => &mut slots[3],
        };
        if let Some((first, _)) = slot {
            problems.general(format!(
                "keys `{first}` and `{key}` both give `{}`",
                role.name()
            ));
        } else {
            *slot = Some((key, value));
        }
    }
    let [x_field, t_field, c_field, err_field] = slots;
    for (field, role) in [
        (&x_field, Role::Offset),
        (&t_field, Role::Time),
        (&c_field, Role::Value),
    ] {
        if field.is_none() {
            problems.general(format!(
                "missing key `{}` (accepted names: {}, any case)",
                role.name(),
                role.aliases()
            ));
        }
    }
    let mut notes = Vec::new();
    if !ignored.is_empty() {
        notes.push(format!(
            "ignored keys not understood: {}",
            ignored.join(", ")
        ));
    }

    let xs = x_field
        .as_ref()
        .and_then(|(k, v)| axis(k, v, offset, |x| x, &mut problems));
    let ts = t_field
        .as_ref()
        .and_then(|(k, v)| axis(k, v, time, f64::to_bits, &mut problems));
    let dims = (ts.as_ref().map(Vec::len), xs.as_ref().map(Vec::len));
    let c = c_field
        .as_ref()
        .and_then(|(k, v)| matrix(k, v, dims, grid::corr_value, &mut problems));
    let err = err_field
        .as_ref()
        .and_then(|(k, v)| matrix(k, v, dims, grid::error_value, &mut problems));

    let meta = match meta_value {
        None => DatasetMeta::default(),
        Some(v) => match serde_json::from_value::<DatasetMeta>(v) {
            Ok(meta) => {
                if let Err(message) = meta.validate() {
                    problems.general(format!("`meta`: {message}"));
                }
                meta
            }
            Err(e) => {
                problems.general(format!("`meta`: {e}"));
                DatasetMeta::default()
            }
        },
    };

    let mut points = Vec::new();
    if let (Some(xs), Some(ts), Some(c)) = (&xs, &ts, &c) {
        let c_key = c_field.as_ref().map_or("C", |(k, _)| k.as_str());
        let err_key = err_field.as_ref().map_or("err", |(k, _)| k.as_str());
        for (i, row) in c.iter().enumerate() {
            for (j, cell) in row.iter().enumerate() {
                let Cell::Given(value) = *cell else {
                    continue;
                };
                let error = match &err {
                    None => None,
                    Some(e) => match e.get(i).and_then(|r| r.get(j)) {
                        Some(Cell::Given(v)) => Some(*v),
                        Some(Cell::Bad) => continue,
                        // A shape problem is already recorded when the cell
                        // does not exist at all.
                        None => continue,
                        Some(Cell::Missing) => {
                            problems.general(format!(
                                "`{err_key}[{i}][{j}]`: null, but `{c_key}[{i}][{j}]` gives \
                                 a value, which needs its error"
                            ));
                            continue;
                        }
                    },
                };
                if let (Some(Some(x)), Some(Some(t))) = (xs.get(j), ts.get(i)) {
                    points.push(Point {
                        x: *x,
                        t: *t,
                        c: value,
                        err: error,
                    });
                }
            }
        }
    }
    problems.check()?;
    let map = grid::assemble(&points, err.is_some(), &mut notes).map_err(|reason| {
        let mut p = Problems::default();
        p.general(reason);
        p.into_error()
    })?;
    Ok(Ingested { map, meta, notes })
}

#[cfg(test)]
mod tests {
    //! Expected values are the ones written into each test input. JSON
    //! grammar facts (no NaN literal, `null`) follow RFC 8259; the nesting
    //! limit of 128 is serde_json's documented default.

    use super::*;
    use crate::ingest::Problem;
    use crate::ingest::testing::{cell, same};

    fn refuse(text: &str) -> Vec<Problem> {
        match parse(text.as_bytes()) {
            Ok(ingested) => panic!("expected refusal, got {:?}", ingested.map),
            Err(e) => e.problems,
        }
    }

    fn reasons(problems: &[Problem]) -> Vec<&str> {
        problems.iter().map(|p| p.reason.as_str()).collect()
    }

    #[test]
    fn accepts_map_with_nulls_errors_meta_and_unsorted_axes() {
        let text = r#"{
            "x": [1, -1, 0],
            "t": [0.5, 0],
            "C": [[0.2, 0.2, 0.6], [null, 0, 1]],
            "err": [[0.01, 0.01, 0.02], [null, 0.01, 0.01]],
            "meta": {"platform": "synthetic tweezer array", "alpha": 3, "synthetic": true},
            "comment": "ignored"
        }"#;
        let ok = parse(text.as_bytes()).expect("valid");
        assert_eq!(ok.map.offsets(), &[-1, 0, 1]);
        assert!(same(ok.map.times(), &[0.0, 0.5]));
        // t = 0 was row 1; x = 1 was column 0 and is null there.
        assert_eq!(ok.map.get(0, 2), None);
        assert!(cell(&ok.map, 0, 1, 1.0, Some(0.01)));
        assert!(cell(&ok.map, 1, 1, 0.6, Some(0.02)));
        assert!(
            ok.notes
                .iter()
                .any(|n| n.starts_with("1 of 6 grid points missing"))
        );
        assert!(ok.notes.iter().any(|n| n.contains("`comment`")));
        assert_eq!(ok.meta.platform, "synthetic tweezer array");
        assert!(ok.meta.alpha.is_some_and(|a| same(&[a], &[3.0])));
        assert!(ok.meta.synthetic);
    }

    #[test]
    fn aliases_and_integral_floats_are_accepted() {
        let ok = parse(br#"{"site": [0.0, 2], "time": [1], "corr": [[0.5, 0.5]]}"#).expect("valid");
        assert_eq!(ok.map.offsets(), &[0, 2]);
    }

    #[test]
    fn bad_cells_are_named_by_path() {
        let mut rows = vec![vec!["0.1".to_string(); 8]; 4];
        rows[3][7] = "\"high\"".into();
        rows[1][2] = "true".into();
        let c: Vec<String> = rows.iter().map(|r| format!("[{}]", r.join(","))).collect();
        let text = format!(
            r#"{{"x": [0,1,2,3,4,5,6,7], "t": [0,1,2,3], "C": [{}]}}"#,
            c.join(",")
        );
        let problems = refuse(&text);
        assert_eq!(
            reasons(&problems),
            vec![
                "`C[1][2]`: expected a number or null, found a boolean",
                "`C[3][7]`: expected a number or null, found a string",
            ]
        );
        assert!(problems.iter().all(|p| p.line.is_none()));
    }

    #[test]
    fn axis_shape_and_error_problems_are_all_collected() {
        let text = r#"{
            "x": [0, 1.5, 0],
            "t": [0, -1],
            "C": [[1, 0, 0]],
            "err": [[0.1, -0.1, null]]
        }"#;
        let problems = refuse(text);
        assert_eq!(
            reasons(&problems),
            vec![
                "`x[1]`: 1.5 is not an integer site offset",
                "`x[2]` repeats the value of `x[0]`",
                "`t[1]`: -1 is negative (times must be ≥ 0)",
                "`C` has 1 row(s) but the time axis has 2 entries (`C` is times × sites)",
                "`err` has 1 row(s) but the time axis has 2 entries (`err` is times × sites)",
                "`err[0][1]`: -0.1 is not positive (one-sigma errors must be > 0)",
                "`err[0][2]`: null, but `C[0][2]` gives a value, which needs its error",
            ]
        );
    }

    #[test]
    fn syntax_errors_carry_the_line() {
        let problems = refuse("{\n  \"x\": [0],\n  \"t\": [0,],\n  \"C\": [[1]]\n}");
        assert_eq!(problems.len(), 1);
        assert_eq!(problems[0].line, Some(3));
        // 1e400 overflows binary64 (IEEE 754 max ≈ 1.798e308).
        let overflow = refuse("{\"x\": [0],\n\"t\": [0],\n\"C\": [[1e400]]}");
        assert_eq!(overflow[0].line, Some(3));
        assert!(overflow[0].reason.contains("out of range"), "{overflow:?}");
        // NaN is not a JSON literal (RFC 8259 §6).
        assert_eq!(
            refuse("{\"x\": [0], \"t\": [0], \"C\": [[NaN]]}")[0].line,
            Some(1)
        );
    }

    #[test]
    fn deep_nesting_is_a_problem_not_a_crash() {
        let deep = format!("{{\"C\": {}{}}}", "[".repeat(100_000), "]".repeat(100_000));
        let problems = refuse(&deep);
        assert_eq!(problems.len(), 1);
        assert!(
            problems[0].reason.contains("recursion limit"),
            "{problems:?}"
        );
        assert_eq!(problems[0].line, Some(1));
        // Three levels inside `C` is one more than a matrix: a plain problem.
        let cube = refuse(r#"{"x": [0], "t": [0], "C": [[[1]]]}"#);
        assert_eq!(
            reasons(&cube),
            vec!["`C[0][0]`: expected a number or null, found an array"]
        );
    }

    #[test]
    fn structure_and_meta_problems() {
        assert!(
            refuse("[1, 2]")[0]
                .reason
                .starts_with("the top level must be an object")
        );
        assert_eq!(refuse(" \n")[0].reason, "the file is empty");
        let missing = refuse(r#"{"x": [0], "C": [[1]]}"#);
        assert!(
            missing[0].reason.starts_with("missing key `t`"),
            "{missing:?}"
        );
        let twice = refuse(r#"{"x": [0], "site": [0], "t": [0], "C": [[1]]}"#);
        assert!(twice[0].reason.contains("both give `x`"), "{twice:?}");
        let meta = refuse(r#"{"x": [0], "t": [0], "C": [[1]], "meta": {"colour": "red"}}"#);
        assert!(
            meta[0].reason.starts_with("`meta`: unknown field `colour`"),
            "{meta:?}"
        );
        let alpha = refuse(r#"{"x": [0], "t": [0], "C": [[1]], "meta": {"alpha": -2}}"#);
        assert!(
            alpha[0].reason.starts_with("`meta`: field `alpha`"),
            "{alpha:?}"
        );
        let all_null = refuse(r#"{"x": [0], "t": [0], "C": [[null]]}"#);
        assert_eq!(
            reasons(&all_null),
            vec!["no data points: every grid point is missing"]
        );
    }

    #[test]
    fn damaged_input_never_panics() {
        let good = br#"{"x": [0, 1], "t": [0], "C": [[1, null]], "err": [[0.1, 0.2]]}"#;
        for end in 0..good.len() {
            let _ = parse(&good[..end]);
        }
        for at in 0..good.len() {
            for byte in [0x00, 0xFF, b'[', b']', b'{', b'"', b'-', b'9', b'n', b','] {
                let mut bad = good.to_vec();
                bad[at] = byte;
                if let Err(e) = parse(&bad) {
                    assert!(!e.problems.is_empty() && e.problems.len() <= 100);
                }
            }
        }
    }
}

//! `CorrelationMap`: the infinite-temperature correlation C(x,t) on a grid of
//! integer site offsets x = i − source and times t, with optional one-sigma
//! errors and a mask of which grid points were measured.
//!
//! Invariant: offsets strictly increase, times strictly increase and are finite
//! and ≥ 0; every present value is finite; every present error is finite and
//! positive. Missing points are never filled: they are absent from the mask and
//! their stored value is 0 so that no NaN ever leaks into arithmetic.

use ndarray::{Array2, s};
use thiserror::Error;

/// Why a set of arrays is not a valid correlation map.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum MapError {
    #[error("the map has no {0}")]
    Empty(&'static str),
    #[error("{axis} must strictly increase (index {index})")]
    NotIncreasing { axis: &'static str, index: usize },
    #[error("time {value} at index {index} is negative or not finite")]
    BadTime { index: usize, value: f64 },
    #[error("{what} has shape {got:?}, expected {expected:?} (times × sites)")]
    Shape {
        what: &'static str,
        got: (usize, usize),
        expected: (usize, usize),
    },
    #[error("value at time index {time}, offset {offset} is not finite")]
    NonFinite { time: usize, offset: i32 },
    #[error("error at time index {time}, offset {offset} is not finite and > 0")]
    BadError { time: usize, offset: i32 },
    #[error("no grid point is present")]
    NothingPresent,
}

/// Σ_x C(x,t) at one time: should be 1 under U(1) symmetry when the whole
/// chain is covered; departures signal losses, readout error or a truncated
/// window.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct SumRulePoint {
    pub t: f64,
    pub sum: f64,
    /// Error of the sum from independent point errors (quadrature sum), when
    /// errors are known.
    pub err: Option<f64>,
    /// Number of offsets present at this time.
    pub present: usize,
}

/// A validated correlation map C(x,t). See the module documentation.
#[derive(Debug, Clone, PartialEq)]
pub struct CorrelationMap {
    x: Vec<i32>,
    t: Vec<f64>,
    values: Array2<f64>,
    errors: Option<Array2<f64>>,
    present: Array2<bool>,
}

impl CorrelationMap {
    /// Builds a map from its axes, values `[time, site]`, optional errors and
    /// the mask of present points. Values and errors at absent points are
    /// ignored and stored as 0.
    ///
    /// # Errors
    /// Any violation of the module invariant, as a [`MapError`].
    pub fn new(
        x: Vec<i32>,
        t: Vec<f64>,
        mut values: Array2<f64>,
        mut errors: Option<Array2<f64>>,
        present: Array2<bool>,
    ) -> Result<Self, MapError> {
        if x.is_empty() {
            return Err(MapError::Empty("site offsets"));
        }
        if t.is_empty() {
            return Err(MapError::Empty("times"));
        }
        if let Some(index) = x.windows(2).position(|w| w[1] <= w[0]) {
            return Err(MapError::NotIncreasing {
                axis: "offsets",
                index: index + 1,
            });
        }
        for (index, &value) in t.iter().enumerate() {
            if !value.is_finite() || value < 0.0 {
                return Err(MapError::BadTime { index, value });
            }
        }
        if let Some(index) = t.windows(2).position(|w| w[1] <= w[0]) {
            return Err(MapError::NotIncreasing {
                axis: "times",
                index: index + 1,
            });
        }
        let expected = (t.len(), x.len());
        let check = |what, dim: (usize, usize)| {
            if dim == expected {
                Ok(())
            } else {
                Err(MapError::Shape {
                    what,
                    got: dim,
                    expected,
                })
            }
        };
        check("values", values.dim())?;
        check("mask", present.dim())?;
        if let Some(e) = &errors {
            check("errors", e.dim())?;
        }
        if !present.iter().any(|&p| p) {
            return Err(MapError::NothingPresent);
        }
        for ((ti, xi), &p) in present.indexed_iter() {
            if !p {
                values[(ti, xi)] = 0.0;
                if let Some(e) = errors.as_mut() {
                    e[(ti, xi)] = 0.0;
                }
                continue;
            }
            if !values[(ti, xi)].is_finite() {
                return Err(MapError::NonFinite {
                    time: ti,
                    offset: x[xi],
                });
            }
            if let Some(e) = &errors {
                let err = e[(ti, xi)];
                if !(err.is_finite() && err > 0.0) {
                    return Err(MapError::BadError {
                        time: ti,
                        offset: x[xi],
                    });
                }
            }
        }
        Ok(Self {
            x,
            t,
            values,
            errors,
            present,
        })
    }

    /// A complete map (every grid point present).
    ///
    /// # Errors
    /// As [`CorrelationMap::new`].
    pub fn complete(
        x: Vec<i32>,
        t: Vec<f64>,
        values: Array2<f64>,
        errors: Option<Array2<f64>>,
    ) -> Result<Self, MapError> {
        let present = Array2::from_elem(values.dim(), true);
        Self::new(x, t, values, errors, present)
    }

    /// Site offsets x = i − source, strictly increasing.
    #[must_use]
    pub fn offsets(&self) -> &[i32] {
        &self.x
    }

    /// Times, strictly increasing.
    #[must_use]
    pub fn times(&self) -> &[f64] {
        &self.t
    }

    /// Values `[time, site]`; 0 where absent.
    #[must_use]
    pub fn values(&self) -> &Array2<f64> {
        &self.values
    }

    /// One-sigma errors `[time, site]` if known; 0 where absent.
    #[must_use]
    pub fn errors(&self) -> Option<&Array2<f64>> {
        self.errors.as_ref()
    }

    /// Mask of measured points `[time, site]`.
    #[must_use]
    pub fn present(&self) -> &Array2<bool> {
        &self.present
    }

    #[must_use]
    pub fn n_sites(&self) -> usize {
        self.x.len()
    }

    #[must_use]
    pub fn n_times(&self) -> usize {
        self.t.len()
    }

    /// Number of grid points that were not measured.
    #[must_use]
    pub fn n_missing(&self) -> usize {
        self.present.iter().filter(|&&p| !p).count()
    }

    /// Column index of offset `x`, if the map has it.
    #[must_use]
    pub fn column_of(&self, x: i32) -> Option<usize> {
        self.x.binary_search(&x).ok()
    }

    /// The value and error at `(time index, site index)`, if present.
    #[must_use]
    pub fn get(&self, ti: usize, xi: usize) -> Option<(f64, Option<f64>)> {
        if *self.present.get((ti, xi))? {
            Some((
                self.values[(ti, xi)],
                self.errors.as_ref().map(|e| e[(ti, xi)]),
            ))
        } else {
            None
        }
    }

    /// Σ_x C(x,t) over the present offsets at every time, with the
    /// quadrature-summed error when errors are known.
    #[must_use]
    pub fn sum_rule(&self) -> Vec<SumRulePoint> {
        (0..self.n_times())
            .map(|ti| {
                let mut sum = 0.0;
                let mut var = 0.0;
                let mut present = 0;
                for xi in 0..self.n_sites() {
                    if let Some((c, e)) = self.get(ti, xi) {
                        sum += c;
                        var += e.unwrap_or(0.0).powi(2);
                        present += 1;
                    }
                }
                SumRulePoint {
                    t: self.t[ti],
                    sum,
                    err: self.errors.as_ref().map(|_| var.sqrt()),
                    present,
                }
            })
            .collect()
    }

    /// The autocorrelation C(0,t) as (t, C, err) at the times where x = 0 was
    /// measured; `None` when the map has no x = 0 column.
    #[must_use]
    pub fn autocorrelation(&self) -> Option<Vec<(f64, f64, Option<f64>)>> {
        let xi = self.column_of(0)?;
        Some(
            (0..self.n_times())
                .filter_map(|ti| self.get(ti, xi).map(|(c, e)| (self.t[ti], c, e)))
                .collect(),
        )
    }

    /// The sub-map with t_min ≤ t ≤ t_max and |x| ≤ x_max (each bound
    /// optional).
    ///
    /// # Errors
    /// [`MapError::Empty`] or [`MapError::NothingPresent`] when the window
    /// holds no data.
    pub fn window(
        &self,
        t_min: Option<f64>,
        t_max: Option<f64>,
        x_max: Option<i32>,
    ) -> Result<Self, MapError> {
        let t0 = self
            .t
            .iter()
            .position(|&t| t_min.is_none_or(|m| t >= m))
            .unwrap_or(self.t.len());
        let t1 = self
            .t
            .iter()
            .rposition(|&t| t_max.is_none_or(|m| t <= m))
            .map_or(0, |i| i + 1);
        let x0 = self
            .x
            .iter()
            .position(|&x| x_max.is_none_or(|m| x >= -m))
            .unwrap_or(self.x.len());
        let x1 = self
            .x
            .iter()
            .rposition(|&x| x_max.is_none_or(|m| x <= m))
            .map_or(0, |i| i + 1);
        if t0 >= t1 {
            return Err(MapError::Empty("times in the window"));
        }
        if x0 >= x1 {
            return Err(MapError::Empty("site offsets in the window"));
        }
        let view = s![t0..t1, x0..x1];
        Self::new(
            self.x[x0..x1].to_vec(),
            self.t[t0..t1].to_vec(),
            self.values.slice(view).to_owned(),
            self.errors.as_ref().map(|e| e.slice(view).to_owned()),
            self.present.slice(view).to_owned(),
        )
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    fn sample() -> CorrelationMap {
        CorrelationMap::complete(
            vec![-1, 0, 1],
            vec![0.0, 1.0],
            array![[0.0, 1.0, 0.0], [0.25, 0.5, 0.25]],
            Some(array![[0.1, 0.1, 0.1], [0.3, 0.4, 0.0012]]),
        )
        .expect("valid")
    }

    #[test]
    fn sum_rule_adds_present_values_and_errors_in_quadrature() {
        let rule = sample().sum_rule();
        assert_eq!(rule.len(), 2);
        // 0.25 + 0.5 + 0.25 = 1 exactly in binary floating point.
        assert!(crate::tolerance::close(rule[1].sum, 1.0, 0.0, 0.0));
        let expected = (0.09f64 + 0.16 + 0.0012 * 0.0012).sqrt();
        assert!(crate::tolerance::close(
            rule[1].err.unwrap(),
            expected,
            1e-15,
            0.0
        ));
    }

    #[test]
    fn rejects_invalid_inputs() {
        let bad_time = CorrelationMap::complete(vec![0], vec![-1.0], array![[1.0]], None);
        assert!(matches!(bad_time, Err(MapError::BadTime { .. })));
        let unsorted = CorrelationMap::complete(vec![1, 0], vec![0.0], array![[1.0, 0.0]], None);
        assert!(matches!(unsorted, Err(MapError::NotIncreasing { .. })));
        let nan = CorrelationMap::complete(vec![0], vec![0.0], array![[f64::NAN]], None);
        assert!(matches!(nan, Err(MapError::NonFinite { .. })));
        let zero_err =
            CorrelationMap::complete(vec![0], vec![0.0], array![[1.0]], Some(array![[0.0]]));
        assert!(matches!(zero_err, Err(MapError::BadError { .. })));
    }

    #[test]
    fn missing_points_are_masked_not_filled() {
        let map = CorrelationMap::new(
            vec![0, 1],
            vec![0.0],
            array![[1.0, f64::NAN]],
            None,
            array![[true, false]],
        )
        .expect("absent NaN is ignored");
        assert_eq!(map.n_missing(), 1);
        assert_eq!(map.get(0, 1), None);
        assert_eq!(map.sum_rule()[0].present, 1);
    }

    #[test]
    fn window_selects_times_and_offsets() {
        let w = sample()
            .window(Some(0.5), None, Some(0))
            .expect("non-empty");
        assert_eq!(w.offsets(), &[0]);
        assert_eq!(w.times().len(), 1);
        assert!(sample().window(Some(5.0), None, None).is_err());
        let auto = sample().autocorrelation().expect("has x = 0");
        assert_eq!(auto.len(), 2);
    }
}

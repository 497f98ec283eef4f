//! The map's geometry: the offsets of a window of sources, which sources
//! each offset averages, the sum rule over the window and the reflection
//! symmetrisation (module documentation of `shots`, "Window and
//! symmetrisation").

use super::*;

/// The map-level quantities derived from one set of pair correlations.
pub(super) struct Derived {
    /// `[time][offset]`
    pub(super) map: Vec<Vec<f64>>,
    pub(super) sums: Vec<f64>,
}

/// The geometry of the map: which offsets, and which sources each averages.
pub(super) struct Geometry {
    pub(super) first: usize,
    pub(super) last: usize,
    pub(super) sites: usize,
    /// Offsets before symmetrisation.
    pub(super) raw_offsets: Vec<i32>,
    /// Offsets of the output map.
    pub(super) offsets: Vec<i32>,
    pub(super) symmetrise: bool,
}

impl Geometry {
    pub(super) fn new(sites: usize, first: usize, last: usize, symmetrise: bool) -> Self {
        let lo = -(last as i32);
        let hi = (sites - 1 - first) as i32;
        let raw_offsets: Vec<i32> = (lo..=hi).collect();
        let offsets = if symmetrise {
            let reach = (last as i32).min(hi);
            (-reach..=reach).collect()
        } else {
            raw_offsets.clone()
        };
        Self {
            first,
            last,
            sites,
            raw_offsets,
            offsets,
            symmetrise,
        }
    }

    /// Sources j of the window with 0 ≤ j + x < N.
    pub(super) fn sources(&self, x: i32) -> impl Iterator<Item = (usize, usize)> + '_ {
        (self.first..=self.last).filter_map(move |j| {
            let i = j as i64 + i64::from(x);
            (0..self.sites as i64)
                .contains(&i)
                .then_some((i as usize, j))
        })
    }

    /// The window mean of C_{j+x,j} at offset x.
    pub(super) fn mean_at(&self, c: &Array2<f64>, x: i32) -> f64 {
        let (sum, n) = self
            .sources(x)
            .fold((0.0, 0usize), |(s, n), (i, j)| (s + c[(i, j)], n + 1));
        sum / n as f64
    }

    pub(super) fn derive(&self, pairs: &[Option<Array2<f64>>], renormalise: bool) -> Derived {
        let mut map = Vec::with_capacity(pairs.len());
        let mut sums = Vec::with_capacity(pairs.len());
        for c in pairs {
            let Some(c) = c else {
                map.push(vec![f64::NAN; self.offsets.len()]);
                sums.push(f64::NAN);
                continue;
            };
            let window = self.last - self.first + 1;
            let sum = (self.first..=self.last)
                .map(|j| c.column(j).sum())
                .sum::<f64>()
                / window as f64;
            let factor = if renormalise { 1.0 / sum } else { 1.0 };
            let row = self
                .offsets
                .iter()
                .map(|&x| {
                    let v = if self.symmetrise {
                        0.5 * (self.mean_at(c, x) + self.mean_at(c, -x))
                    } else {
                        self.mean_at(c, x)
                    };
                    v * factor
                })
                .collect();
            map.push(row);
            sums.push(sum);
        }
        Derived { map, sums }
    }

    pub(super) fn sources_per_offset(&self) -> Vec<usize> {
        self.offsets
            .iter()
            .map(|&x| {
                if self.symmetrise {
                    self.sources(x).count() + self.sources(-x).count()
                } else {
                    self.sources(x).count()
                }
            })
            .collect()
    }

    pub(super) fn skipped_pairs(&self) -> usize {
        let window = self.last - self.first + 1;
        self.raw_offsets
            .iter()
            .map(|&x| window - self.sources(x).count())
            .sum()
    }
}

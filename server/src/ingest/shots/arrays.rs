//! The array shot layouts, NPZ and HDF5: `init` (states × sites), `meas`
//! (shots × sites), `state` (per shot, the row of `init`) and `t` (per
//! shot), checked and fed to the accumulator by one routine
//! ([`shots_from_arrays`]) over a [`ShotSource`] per container. The
//! containers themselves are read by the ingest layer's one NPY/NPZ reader
//! (`ingest::npy`, members in place) and one HDF5 reader (`ingest::hdf5`,
//! rows in blocks).

use spreadscope_physics::model::shots::{MAX_SITES, ShotAccumulator, ShotError, ShotRecords};

use super::{ShotsIngested, one_problem, row_names, summary_note};
use crate::ingest::hdf5::{dataset, numeric, open_hdf5, read_all, read_rows};
use crate::ingest::npy::{self, Kind, NpyView};
use crate::ingest::{IngestError, Problem, Problems, grid};

/// Shots per block when reading `meas`, `state` and `t`: bounded memory (a
/// block of a 4096-site chain is 256 MiB at most as f64, typically ~20 MiB)
/// with few read calls.
const BLOCK_ROWS: u64 = 1 << 16;

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
    let mut problems = Problems::default();
    let mut views: [Option<NpyView>; 4] = [None, None, None, None];
    let slot_of = |stem: &str| {
        NPZ_NAMES
            .iter()
            .position(|(_, aliases)| aliases.contains(&stem))
    };
    let ignored = npy::npz_views(
        bytes,
        &|stem| slot_of(stem).is_some(),
        &mut problems,
        &mut |stem, view, problems| {
            let Some((slot, (canonical, _))) =
                slot_of(&stem).and_then(|k| Some((k, NPZ_NAMES.get(k)?)))
            else {
                return;
            };
            if let Some(place) = views.get_mut(slot) {
                if place.is_some() {
                    problems.general(format!("two arrays play the part of `{canonical}`"));
                }
                *place = Some(view);
            }
        },
    )
    .map_err(one_problem)?;
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
            Self::Npy(v) => v.at2(i, j).unwrap_or(f64::NAN),
            Self::Dense { shape, values, .. } => {
                values.get(i * shape.1 + j).copied().unwrap_or(f64::NAN)
            }
        }
    }

    fn name(&self) -> &'static str {
        match self {
            Self::Npy(_) => "init",
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
        for (name, v) in [("state", self.state), ("t", self.t)] {
            if v.len1().is_none() {
                problems.push(format!(
                    "array `{name}` has shape {:?}; expected one value per shot",
                    v.shape
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
        let block_rows = BLOCK_ROWS as usize;
        let mut first = 0;
        while first < shots {
            let rows = block_rows.min(shots - first);
            let bytes = self.meas.byte_rows(first, rows, sites);
            let meas = if bytes.is_some() {
                Vec::new()
            } else {
                let mut v = Vec::with_capacity(rows * sites);
                for k in first..first + rows {
                    for i in 0..sites {
                        v.push(self.meas.at2(k, i).unwrap_or(f64::NAN));
                    }
                }
                v
            };
            let block = ShotBlock {
                first,
                rows,
                meas,
                state: (first..first + rows)
                    .map(|k| self.state.at(k).unwrap_or(f64::NAN))
                    .collect(),
                t: (first..first + rows)
                    .map(|k| self.t.at(k).unwrap_or(f64::NAN))
                    .collect(),
            };
            each(&block, bytes);
            first += rows;
        }
        Ok(())
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
            *bit = grid::bit_value(v).unwrap_or_else(|| {
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
                        *bit = grid::bit_value(v).unwrap_or_else(|| {
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
            let end = (first + BLOCK_ROWS).min(shots);
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

#[cfg(test)]
mod tests {
    use std::io::Cursor;

    use ndarray::{Array1, Array2};
    use ndarray_npy::NpzWriter;
    use spreadscope_physics::model::shots::{EstimateOptions, SourceWindow, estimate};

    use super::super::fixtures::{
        CSV, H5_BAD, H5_CHUNKED, H5_CONTIGUOUS, H5_MAP, NPZ, same_as_csv,
    };
    use super::super::{ShotFormat, parse, parse_csv};
    use super::*;

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
}

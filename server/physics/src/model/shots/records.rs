//! Shot records: the streaming accumulator that counts shots per (initial
//! state, time) and the aggregated, canonically ordered records the
//! estimator reads (module documentation of `shots`, "Sufficient
//! statistics").

use super::*;

/// Collects shots one at a time (streaming) into per-(state, time) counters.
/// Callers validate the text; this type checks only lengths, indices and
/// times, and keeps memory independent of the number of shots.
#[derive(Debug, Clone)]
pub struct ShotAccumulator {
    sites: usize,
    /// Initial bits, states × sites, each 0 or 1.
    init: Vec<u8>,
    /// Distinct times in order of first appearance.
    times: Vec<f64>,
    time_index: HashMap<u64, u32>,
    /// (state, time index) → cell.
    cell_index: HashMap<(u32, u32), u32>,
    /// (state, time index) of every cell.
    cell_keys: Vec<(u32, u32)>,
    /// Shots per cell.
    shots: Vec<u32>,
    /// Up readings per cell and site, cells × sites.
    ups: Vec<u32>,
    /// The last (state, time bits) seen and its cell: consecutive shots of one
    /// state and time, the usual file order, skip both hash look-ups.
    last: Option<((u32, u64), u32)>,
    total_shots: u64,
}

impl ShotAccumulator {
    /// An empty accumulator for a chain of `sites` sites.
    ///
    /// # Errors
    /// [`ShotError::BadSites`] for 0 or more than [`MAX_SITES`] sites.
    pub fn new(sites: usize) -> Result<Self, ShotError> {
        if sites == 0 || sites > MAX_SITES {
            return Err(ShotError::BadSites(sites));
        }
        Ok(Self {
            sites,
            init: Vec::new(),
            times: Vec::new(),
            time_index: HashMap::new(),
            cell_index: HashMap::new(),
            cell_keys: Vec::new(),
            shots: Vec::new(),
            ups: Vec::new(),
            last: None,
            total_shots: 0,
        })
    }

    #[must_use]
    pub fn sites(&self) -> usize {
        self.sites
    }

    /// Number of initial states declared so far.
    #[must_use]
    pub fn n_states(&self) -> usize {
        self.init.len() / self.sites
    }

    /// Declares an initial state and returns its index. Each byte's lowest
    /// bit is the bit (so both 0/1 values and ASCII `'0'`/`'1'` work); the
    /// caller has checked that the bytes are bits.
    ///
    /// # Errors
    /// [`ShotError::Length`] when `bits` does not have one entry per site.
    pub fn add_state(&mut self, bits: &[u8]) -> Result<usize, ShotError> {
        if bits.len() != self.sites {
            return Err(ShotError::Length {
                what: "initial bits",
                expected: self.sites,
                got: bits.len(),
            });
        }
        let index = self.n_states();
        self.init.extend(bits.iter().map(|b| b & 1));
        Ok(index)
    }

    /// The initial bits (0/1) of a declared state.
    #[must_use]
    pub fn initial_bits(&self, state: usize) -> Option<&[u8]> {
        self.init
            .get(state * self.sites..(state + 1) * self.sites)
            .filter(|_| state < self.n_states())
    }

    /// Adds one shot of `state` measured at time `t`; each byte's lowest bit
    /// is the measured bit, as in [`ShotAccumulator::add_state`].
    ///
    /// # Errors
    /// A wrong length, an undeclared state, a negative or non-finite time,
    /// more than [`MAX_COUNTERS`] counters, or more than `u32::MAX` shots in
    /// one (state, time).
    pub fn add_shot(&mut self, state: usize, t: f64, meas: &[u8]) -> Result<(), ShotError> {
        if meas.len() != self.sites {
            return Err(ShotError::Length {
                what: "measured bits",
                expected: self.sites,
                got: meas.len(),
            });
        }
        if state >= self.n_states() {
            return Err(ShotError::UnknownState(state));
        }
        if !t.is_finite() || t < 0.0 {
            return Err(ShotError::BadTime(t));
        }
        // −0 and +0 are one time.
        let t = t + 0.0;
        let state = u32::try_from(state).map_err(|_| ShotError::TooManyCounters)?;
        let key = (state, t.to_bits());
        let cell = match self.last {
            Some((k, cell)) if k == key => cell,
            _ => {
                let cell = self.cell_for(state, t)?;
                self.last = Some((key, cell));
                cell
            }
        } as usize;
        self.shots[cell] = self.shots[cell]
            .checked_add(1)
            .ok_or(ShotError::TooManyShots)?;
        let row = &mut self.ups[cell * self.sites..(cell + 1) * self.sites];
        for (count, &bit) in row.iter_mut().zip(meas) {
            *count += u32::from(bit & 1);
        }
        self.total_shots += 1;
        Ok(())
    }

    fn cell_for(&mut self, state: u32, t: f64) -> Result<u32, ShotError> {
        let next_time = self.times.len();
        let time = *self.time_index.entry(t.to_bits()).or_insert_with(|| {
            // Times beyond u32 would need more cells than MAX_COUNTERS anyway.
            next_time as u32
        });
        if time as usize == next_time {
            self.times.push(t);
        }
        match self.cell_index.entry((state, time)) {
            Entry::Occupied(e) => Ok(*e.get()),
            Entry::Vacant(e) => {
                let cell = self.cell_keys.len();
                if (cell + 1) * self.sites > MAX_COUNTERS {
                    return Err(ShotError::TooManyCounters);
                }
                self.cell_keys.push((state, time));
                self.shots.push(0);
                self.ups.resize(self.ups.len() + self.sites, 0);
                Ok(*e.insert(cell as u32))
            }
        }
    }

    /// Number of per-site counters held: (state, time) pairs × sites. It
    /// depends on how many distinct (state, time) pairs occur, never on the
    /// number of shots.
    #[must_use]
    pub fn counter_len(&self) -> usize {
        self.ups.len()
    }

    /// Shots added so far.
    #[must_use]
    pub fn total_shots(&self) -> u64 {
        self.total_shots
    }

    /// The complete records, times sorted and states ranked in a canonical
    /// order that depends only on the shots, not on the indices they were
    /// declared under: by initial bits (lexicographic), then by the list of
    /// (time, shots, up counts) of each state's cells in time order. States
    /// that tie are identical in every count, so their relative order changes
    /// no result. State indices keep their declared meaning for
    /// [`ShotRecords::counts`] and [`ShotRecords::initial_bits`].
    ///
    /// # Errors
    /// [`ShotError::NoShots`] when nothing was added.
    pub fn finish(self) -> Result<ShotRecords, ShotError> {
        if self.total_shots == 0 {
            return Err(ShotError::NoShots);
        }
        let mut order: Vec<usize> = (0..self.times.len()).collect();
        order.sort_by(|&a, &b| self.times[a].total_cmp(&self.times[b]));
        let mut rank = vec![0usize; self.times.len()];
        for (new, &old) in order.iter().enumerate() {
            rank[old] = new;
        }
        let times: Vec<f64> = order.iter().map(|&old| self.times[old]).collect();
        let mut cells: Vec<Vec<Cell>> = vec![Vec::new(); times.len()];
        // Per state, (time rank, cell) of its cells, for the canonical order.
        let n_states = self.n_states();
        let mut by_state: Vec<Vec<(usize, usize)>> = vec![Vec::new(); n_states];
        for (cell, &(state, time)) in self.cell_keys.iter().enumerate() {
            let ti = rank[time as usize];
            cells[ti].push(Cell {
                state,
                shots: self.shots[cell],
                offset: cell * self.sites,
            });
            by_state[state as usize].push((ti, cell));
        }
        for list in &mut by_state {
            list.sort_unstable();
        }
        let sites = self.sites;
        let bits = |s: usize| &self.init[s * sites..(s + 1) * sites];
        let history = |s: usize| {
            by_state[s].iter().map(|&(ti, cell)| {
                (
                    ti,
                    self.shots[cell],
                    &self.ups[cell * sites..(cell + 1) * sites],
                )
            })
        };
        let mut state_order: Vec<u32> = (0..n_states as u32).collect();
        state_order.sort_by(|&a, &b| {
            let (a, b) = (a as usize, b as usize);
            bits(a)
                .cmp(bits(b))
                .then_with(|| history(a).cmp(history(b)))
        });
        let mut state_rank = vec![0u32; n_states];
        for (k, &state) in state_order.iter().enumerate() {
            state_rank[state as usize] = k as u32;
        }
        for list in &mut cells {
            list.sort_by_key(|c| state_rank[c.state as usize]);
        }
        Ok(ShotRecords {
            sites: self.sites,
            init: self.init,
            times,
            cells,
            ups: self.ups,
            order: state_order,
            state_rank,
            total_shots: self.total_shots,
        })
    }
}

/// The shots of one initial state at one time.
#[derive(Debug, Clone, Copy)]
pub(super) struct Cell {
    pub(super) state: u32,
    pub(super) shots: u32,
    /// Start of this cell's per-site up counts in `ShotRecords::ups`.
    pub(super) offset: usize,
}

/// Complete shot records in aggregated form: per (state, time), the number
/// of shots and of up readings at each site. See the module documentation.
#[derive(Debug, Clone)]
pub struct ShotRecords {
    pub(super) sites: usize,
    pub(super) init: Vec<u8>,
    pub(super) times: Vec<f64>,
    /// Per time index, the cells sorted by canonical state rank.
    pub(super) cells: Vec<Vec<Cell>>,
    pub(super) ups: Vec<u32>,
    /// The states in canonical order (see [`ShotAccumulator::finish`]):
    /// `order[k]` is the declared index of the state ranked k.
    pub(super) order: Vec<u32>,
    /// Inverse of `order`: the canonical rank of each declared state.
    pub(super) state_rank: Vec<u32>,
    pub(super) total_shots: u64,
}

impl ShotRecords {
    #[must_use]
    pub fn sites(&self) -> usize {
        self.sites
    }

    /// Distinct times, strictly increasing.
    #[must_use]
    pub fn times(&self) -> &[f64] {
        &self.times
    }

    /// Number of initial states.
    #[must_use]
    pub fn n_states(&self) -> usize {
        self.init.len() / self.sites
    }

    /// The initial bits (0/1) of a state.
    #[must_use]
    pub fn initial_bits(&self, state: usize) -> Option<&[u8]> {
        self.init
            .get(state * self.sites..(state + 1) * self.sites)
            .filter(|_| state < self.n_states())
    }

    /// Number of states measured at each time.
    #[must_use]
    pub fn states_per_time(&self) -> Vec<usize> {
        self.cells.iter().map(Vec::len).collect()
    }

    /// Number of shots at each time.
    #[must_use]
    pub fn shots_per_time(&self) -> Vec<u64> {
        self.cells
            .iter()
            .map(|list| list.iter().map(|c| u64::from(c.shots)).sum())
            .collect()
    }

    #[must_use]
    pub fn total_shots(&self) -> u64 {
        self.total_shots
    }

    /// Per-site counters held; see [`ShotAccumulator::counter_len`].
    #[must_use]
    pub fn counter_len(&self) -> usize {
        self.ups.len()
    }

    /// Number of shots and up readings per site of `state` at time index
    /// `ti`, if that state was measured then.
    #[must_use]
    pub fn counts(&self, state: usize, ti: usize) -> Option<(u32, &[u32])> {
        let list = self.cells.get(ti)?;
        let rank = *self.state_rank.get(state)?;
        let k = list
            .binary_search_by_key(&rank, |c| self.state_rank[c.state as usize])
            .ok()?;
        let cell = list[k];
        Some((cell.shots, &self.ups[cell.offset..cell.offset + self.sites]))
    }

    pub(super) fn bit(&self, state: u32, site: usize) -> u8 {
        self.init[state as usize * self.sites + site]
    }
}

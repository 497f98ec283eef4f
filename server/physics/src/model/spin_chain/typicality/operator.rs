//! The Hamiltonian of one magnetisation sector applied without being
//! stored, to one or several real vectors at once ("lanes"), in a basis
//! ordered so that every part of H reads contiguous rows (module
//! documentation of `typicality`).
//!
//! Instruction set: the work of one task is compiled twice, for the
//! baseline x86-64 and for AVX2, and the processor's features pick one at
//! run time (the `multiversion` crate: it writes the feature check and the
//! dispatch that safe Rust cannot). Rust never fuses a multiplication and an
//! addition on its own, and every sum here has a fixed order (the crossing
//! sums a balanced tree, written out), so both versions do the same
//! operations in the same order and give the same bits; vectorising only
//! processes lanes and rows side by side. With two lanes, the AVX2 version
//! executes about a fifth fewer instructions (callgrind, 16 sites). The
//! crossing views its gathered sources and weights as fixed-size groups
//! through `bytemuck` (one length check per slice; the standard library's
//! `as_chunks` needs a newer compiler than the workspace's minimum).

use super::*;

/// A complex amplitude (num-complex's `Complex64`) of an output state.
pub(super) type Amp = num_complex::Complex64;

/// Most sites in one half of the chain (N ≤ 24).
const MAX_HALF: usize = 12;

/// Rows of the basis handled by one parallel task at least (about 16 kB
/// of amplitudes per lane for the middle panels of 20 sites).
const TASK_AMPLITUDES: usize = 2048;

/// Per lane: Re⟨x|y⟩ and ⟨y|y⟩ of one application (see
/// [`SectorOperator::apply`]).
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub(super) struct LaneSums {
    pub(super) overlap: f64,
    pub(super) norm_sq: f64,
}

/// One class panel of the basis: the words whose low half (sites below
/// `low_bits`) has `class` set bits. Its rows are the high halves with
/// up − class set bits, its columns the low halves of the class, both in
/// increasing numeric order; the panel is stored row by row.
#[derive(Debug, Clone, Copy)]
pub(super) struct Panel {
    pub(super) class: usize,
    pub(super) start: usize,
    pub(super) rows: usize,
    pub(super) cols: usize,
}

/// A small sparse matrix between two classes of low words, row by row:
/// row r holds (column r', coupling index k) for
/// `entries[rows[r]..rows[r + 1]]`; the coupling is looked up as `j[k]` in
/// a slice the caller chooses, so one table serves every high site.
#[derive(Debug, Default)]
pub(super) struct RowTable {
    rows: Vec<u32>,
    entries: Vec<(u16, u16)>,
}

impl RowTable {
    /// Row by row over `words` (one class), the entries `of(word)` yields.
    fn build(words: &[u32], of: impl Fn(u32) -> Vec<(u16, u16)>) -> Self {
        let mut rows = vec![0];
        let mut entries = Vec::new();
        for &w in words {
            entries.extend(of(w));
            rows.push(entries.len() as u32);
        }
        Self { rows, entries }
    }

    /// y[c] = Σ j[k] x[c'] over the columns c of R rows of one panel at
    /// once, lane by lane (each column holds its `B` lanes side by side), so
    /// that every table entry and its coupling are read once for all of
    /// them.
    #[inline(always)]
    fn product_rows<const B: usize, const R: usize>(
        &self,
        x: [&[[f64; B]]; R],
        j: &[f64],
        y: [&mut [[f64; B]]; R],
    ) {
        let width = y[0].len();
        let mut y = y;
        for r in 0..width {
            let mut acc = [[0.0; B]; R];
            let (from, to) = (self.rows[r] as usize, self.rows[r + 1] as usize);
            for &(col, k) in &self.entries[from..to] {
                let weight = j[k as usize];
                for (sum, row) in acc.iter_mut().zip(&x) {
                    let v = &row[col as usize];
                    for lane in 0..B {
                        sum[lane] += weight * v[lane];
                    }
                }
            }
            for (out, sum) in y.iter_mut().zip(acc) {
                out[r] = sum;
            }
        }
    }

    /// y[c] += Σ_{(c', q)} Σ_i j[q · m + i] · g[c' · m + i] over the columns c
    /// of y, lane by lane, where g holds the m source rows column by column:
    /// one table entry serves every source, and the sources of one column
    /// are contiguous. R rows of one panel (each with its own sources and
    /// weights) share every decoded table entry, and their values sit side
    /// by side in g and j (`[column][source][row][lane]`), the weights
    /// repeated for every lane: with two lanes and two rows one product or
    /// sum covers four values, a full AVX2 register. `assign` overwrites y
    /// instead of adding to it.
    #[inline(always)]
    fn add_crossing<const B: usize, const R: usize>(
        &self,
        g: &[[[f64; B]; R]],
        m: usize,
        j: &[[[f64; B]; R]],
        y: &mut [[[f64; B]; R]],
        assign: bool,
    ) {
        // A fixed count of sources lets the compiler unroll the inner loop
        // (a factor of about three fewer instructions than a loop over m).
        match m {
            1 => self.add_crossing_fixed::<B, 1, R>(g, j, y, assign),
            2 => self.add_crossing_fixed::<B, 2, R>(g, j, y, assign),
            3 => self.add_crossing_fixed::<B, 3, R>(g, j, y, assign),
            4 => self.add_crossing_fixed::<B, 4, R>(g, j, y, assign),
            5 => self.add_crossing_fixed::<B, 5, R>(g, j, y, assign),
            6 => self.add_crossing_fixed::<B, 6, R>(g, j, y, assign),
            7 => self.add_crossing_fixed::<B, 7, R>(g, j, y, assign),
            8 => self.add_crossing_fixed::<B, 8, R>(g, j, y, assign),
            9 => self.add_crossing_fixed::<B, 9, R>(g, j, y, assign),
            10 => self.add_crossing_fixed::<B, 10, R>(g, j, y, assign),
            11 => self.add_crossing_fixed::<B, 11, R>(g, j, y, assign),
            _ => self.add_crossing_fixed::<B, MAX_HALF, R>(g, j, y, assign),
        }
    }

    /// [`RowTable::add_crossing`] for exactly M sources.
    #[inline(always)]
    fn add_crossing_fixed<const B: usize, const M: usize, const R: usize>(
        &self,
        g: &[[[f64; B]; R]],
        j: &[[[f64; B]; R]],
        y: &mut [[[f64; B]; R]],
        assign: bool,
    ) {
        // Viewed as whole groups of M (bytemuck checks the length once):
        // one bounds check per entry.
        let g: &[[[[f64; B]; R]; M]] = bytemuck::cast_slice(g);
        let j: &[[[[f64; B]; R]; M]] = bytemuck::cast_slice(j);
        for (r, out) in y.iter_mut().enumerate() {
            let mut acc = [[0.0; B]; R];
            let (from, to) = (self.rows[r] as usize, self.rows[r + 1] as usize);
            for &(col, q) in &self.entries[from..to] {
                let (weights, values) = (&j[q as usize], &g[col as usize]);
                let mut terms = [[[0.0; B]; R]; M];
                for i in 0..M {
                    for row in 0..R {
                        for b in 0..B {
                            terms[i][row][b] = weights[i][row][b] * values[i][row][b];
                        }
                    }
                }
                let total = pairwise_sum(terms);
                for (sum, part) in acc.iter_mut().zip(&total) {
                    for b in 0..B {
                        sum[b] += part[b];
                    }
                }
            }
            if assign {
                *out = acc;
            } else {
                for (o, a) in out.as_flattened_mut().iter_mut().zip(acc.as_flattened()) {
                    *o += a;
                }
            }
        }
    }
}

/// Σ_i terms[i], lane by lane, as a balanced tree: the additions of one
/// level are independent, so the sum waits on ⌈log₂ M⌉ additions instead of
/// M − 1 in a chain (the crossing sums were bound by that chain's latency).
#[inline(always)]
fn pairwise_sum<const B: usize, const R: usize, const M: usize>(
    mut terms: [[[f64; B]; R]; M],
) -> [[f64; B]; R] {
    let mut len = M;
    while len > 1 {
        let half = len / 2;
        let rest = len - half;
        let (head, tail) = terms.split_at_mut(rest);
        for (sum, term) in head[..half].iter_mut().zip(&tail[..half]) {
            for (s, t) in sum.as_flattened_mut().iter_mut().zip(term.as_flattened()) {
                *s += t;
            }
        }
        len = rest;
    }
    terms[0]
}

/// The Hamiltonian of one sector, applied without being stored.
///
/// Every basis word splits into a low half (the `low_bits` lowest sites) and
/// a high half. The basis is ordered by the number c of up spins in the low
/// half ("class"), then by the high half, then by the low half: each class
/// is a panel whose rows are high halves and whose columns are low halves
/// (two-table indexing in the spirit of H. Q. Lin, Phys. Rev. B 42, 6561
/// (1990), from memory). A flip-flop moves an up spin p to an empty site q;
/// by where p and q lie, H splits into three parts, each applied row by row
/// without computing a rank per matrix element:
///
/// - both in the high half: row h of a panel meets row h' of the same panel
///   (h' = h with the spin moved), column for column — a scaled sum of two
///   contiguous rows;
/// - both in the low half: the same small sparse matrix of class c inside
///   every row of the panel (one table per class);
/// - one in each half: row h of panel c meets a row of panel c ± 1, columns
///   paired by one table per class that stores the low site, so that the
///   coupling to the high site is looked up in that site's row of J.
///
/// The tables store 4 bytes per entry and do not depend on the high site,
/// so the tables of a class stay in the core's cache while its panel is
/// swept; a 20-site sector needs about 40 kB of tables.
#[derive(Debug)]
pub(super) struct SectorOperator {
    pub(super) sites: usize,
    up: usize,
    /// Basis words in basis order.
    pub(super) states: Vec<u32>,
    pub(super) diagonal: Vec<f64>,
    low_bits: usize,
    /// J_ij in row-major order (N × N, zero on the diagonal).
    coupling: Vec<f64>,
    panels: Vec<Panel>,
    /// Index into `panels` of every class that has one.
    panel_of_class: Vec<Option<usize>>,
    /// High halves by their number of set bits, in increasing order.
    high_words: Vec<Vec<u32>>,
    /// Position of every high half among those with as many set bits.
    high_rank: Vec<u32>,
    /// Per class c: the flip-flops inside the low half (k = p·N + q).
    inside: Vec<RowTable>,
    /// Per class c: an empty low site q receives an up spin (columns in
    /// class c + 1, k = q).
    to_low: Vec<RowTable>,
    /// Per class c: an up spin at low site q leaves (columns in class
    /// c − 1, k = q).
    from_low: Vec<RowTable>,
    /// Per high half h and direction (slot 2h + 1: its up spins move to
    /// the low half; 2h: low spins move to its empty sites), the couplings
    /// between every low site q and those high sites p, as
    /// `[q · m + i]` for the i-th of the m sites in increasing order;
    /// `crossing_start` has the offsets of the slots. Derivable from
    /// `coupling`, but copying a slot costs less than picking its couplings
    /// out of J for every row (5 % of all instructions at 16 sites).
    crossing_weights: Vec<f64>,
    crossing_start: Vec<usize>,
    /// The fixed partition into parallel tasks: (panel, first row, rows).
    tasks: Vec<(usize, usize, usize)>,
}

impl SectorOperator {
    pub(super) fn build(chain: &SpinChain, sector: &Sector) -> Self {
        let n = sector.sites;
        let up = sector.up;
        let low_bits = n / 2;
        let high_bits = n - low_bits;
        let mut coupling = vec![0.0; n * n];
        for term in chain.flip_terms() {
            let i = term.mask.trailing_zeros() as usize;
            let j = 31 - term.mask.leading_zeros() as usize;
            coupling[i * n + j] = term.amplitude;
            coupling[j * n + i] = term.amplitude;
        }
        let by_count = |bits: usize| {
            let mut words: Vec<Vec<u32>> = vec![Vec::new(); bits + 1];
            let mut rank = vec![0u32; 1 << bits];
            for w in 0u32..1 << bits {
                let class = &mut words[w.count_ones() as usize];
                rank[w as usize] = class.len() as u32;
                class.push(w);
            }
            (words, rank)
        };
        let (low_words, low_rank) = by_count(low_bits);
        let (high_words, high_rank) = by_count(high_bits);
        let low = |w: u32| low_rank[w as usize] as u16;
        let bit = |w: u32, s: usize| (w >> s) & 1 == 1;
        let inside = low_words
            .iter()
            .map(|class| {
                RowTable::build(class, |w| {
                    let mut out = Vec::new();
                    for p in (0..low_bits).filter(|&p| bit(w, p)) {
                        for q in (0..low_bits).filter(|&q| !bit(w, q)) {
                            if coupling[p * n + q] != 0.0 {
                                out.push((low(w ^ (1 << p) ^ (1 << q)), (p * n + q) as u16));
                            }
                        }
                    }
                    out
                })
            })
            .collect();
        let cross = |filled: bool| -> Vec<RowTable> {
            low_words
                .iter()
                .map(|class| {
                    RowTable::build(class, |w| {
                        (0..low_bits)
                            .filter(|&q| bit(w, q) == filled)
                            .map(|q| (low(w ^ (1 << q)), q as u16))
                            .collect()
                    })
                })
                .collect()
        };
        let to_low = cross(false);
        let from_low = cross(true);

        let mut panels = Vec::new();
        let mut panel_of_class = vec![None; low_bits + 1];
        let mut start = 0;
        for (class, slot) in panel_of_class.iter_mut().enumerate() {
            if class > up || up - class > high_bits {
                continue;
            }
            let rows = high_words[up - class].len();
            let cols = low_words[class].len();
            *slot = Some(panels.len());
            panels.push(Panel {
                class,
                start,
                rows,
                cols,
            });
            start += rows * cols;
        }
        debug_assert_eq!(start, sector.dim());
        let mut states = Vec::with_capacity(start);
        for panel in &panels {
            for &h in &high_words[up - panel.class] {
                for &l in &low_words[panel.class] {
                    states.push((h << low_bits) | l);
                }
            }
        }
        let diagonal = states
            .par_iter()
            .map(|&s| chain.diagonal_energy(s))
            .collect();
        let mut crossing_weights = Vec::new();
        let mut crossing_start = vec![0];
        for h in 0u32..1 << high_bits {
            for filled in [false, true] {
                let sites: Vec<usize> = (0..high_bits).filter(|&p| bit(h, p) == filled).collect();
                for q in 0..low_bits {
                    crossing_weights
                        .extend(sites.iter().map(|&p| coupling[(low_bits + p) * n + q]));
                }
                crossing_start.push(crossing_weights.len());
            }
        }
        let mut tasks = Vec::new();
        for (index, panel) in panels.iter().enumerate() {
            let per_task = (TASK_AMPLITUDES / panel.cols.max(1)).max(1);
            let mut row = 0;
            while row < panel.rows {
                let count = per_task.min(panel.rows - row);
                tasks.push((index, row, count));
                row += count;
            }
        }
        Self {
            sites: n,
            up,
            states,
            diagonal,
            low_bits,
            coupling,
            crossing_weights,
            crossing_start,
            panels,
            panel_of_class,
            high_words,
            high_rank,
            inside,
            to_low,
            from_low,
            tasks,
        }
    }

    pub(super) fn dim(&self) -> usize {
        self.states.len()
    }

    /// The row of panel `class` whose high half is `h`.
    fn row<'x, const B: usize>(&self, x: &'x [[f64; B]], class: usize, h: u32) -> &'x [[f64; B]] {
        let panel = &self.panels[self.panel_of_class[class].expect("panel of a valid class")];
        let first = panel.start + self.high_rank[h as usize] as usize * panel.cols;
        &x[first..first + panel.cols]
    }

    /// y ← s·(H − e)·x − z for `B` interleaved lanes (z: the optional
    /// `back` vector), returning per lane Re⟨x|y⟩ and ⟨y|y⟩. Sums run over
    /// a fixed partition of the rows in basis order, so that neither the
    /// thread count nor the other lanes change a lane's bits.
    pub(super) fn apply<const B: usize>(
        &self,
        x: &[[f64; B]],
        y: &mut [[f64; B]],
        scale: f64,
        shift: f64,
        back: Option<&[[f64; B]]>,
    ) -> [LaneSums; B] {
        let mut pieces = Vec::with_capacity(self.tasks.len());
        let mut rest = y;
        for &(panel, _, rows) in &self.tasks {
            let len = rows * self.panels[panel].cols;
            let (head, tail) = std::mem::take(&mut rest).split_at_mut(len);
            pieces.push(head);
            rest = tail;
        }
        let step = Step {
            x,
            scale,
            shift,
            back,
        };
        let partials: Vec<[LaneSums; B]> = pieces
            .into_par_iter()
            .zip(self.tasks.par_iter())
            .map_init(
                TaskScratch::default,
                |scratch, (ys, &(index, first_row, _))| {
                    apply_task::<B>(self, &step, ys, index, first_row, scratch)
                },
            )
            .collect();
        let mut total = [LaneSums::default(); B];
        for part in &partials {
            for (t, p) in total.iter_mut().zip(part) {
                t.overlap += p.overlap;
                t.norm_sq += p.norm_sq;
            }
        }
        total
    }

    /// Up spins in the high half of the rows of class `class`.
    fn sites_up_high(&self, class: usize) -> usize {
        self.up - class
    }
}

/// What every task of one [`SectorOperator::apply`] reads.
#[derive(Clone, Copy)]
struct Step<'a, const B: usize> {
    x: &'a [[f64; B]],
    scale: f64,
    shift: f64,
    back: Option<&'a [[f64; B]]>,
}

/// One task of [`SectorOperator::apply`]: the rows `ys` of panel
/// `index` from row `first_row` on. Compiled once more for AVX2 and
/// chosen at run time when the processor has it; the arithmetic and its
/// order are the same in both (no fused multiply-add), so the bits are.
#[multiversion::multiversion(targets("x86_64+avx2"))]
fn apply_task<const B: usize>(
    op: &SectorOperator,
    step: &Step<'_, B>,
    ys: &mut [[f64; B]],
    index: usize,
    first_row: usize,
    scratch: &mut TaskScratch<B>,
) -> [LaneSums; B] {
    let x = step.x;
    let panel = op.panels[index];
    let c = panel.class;
    let width = panel.cols;
    let mut sums = [LaneSums::default(); B];
    // Inside the low half: the class's table, four rows at a time so that
    // every entry is decoded once for all of them. These are the first terms
    // of every row, so they overwrite y.
    let first = panel.start + first_row * panel.cols;
    let task_x = &x[first..first + ys.len()];
    let mut quads = ys.chunks_exact_mut(4 * width);
    let mut x_quads = task_x.chunks_exact(4 * width);
    for (y4, x4) in (&mut quads).zip(&mut x_quads) {
        let mut y_rows = y4.chunks_exact_mut(width);
        let mut x_rows = x4.chunks_exact(width);
        let y_rows: [&mut [[f64; B]]; 4] =
            std::array::from_fn(|_| y_rows.next().expect("four rows"));
        let x_rows: [&[[f64; B]]; 4] = std::array::from_fn(|_| x_rows.next().expect("four rows"));
        op.inside[c].product_rows::<B, 4>(x_rows, &op.coupling, y_rows);
    }
    for (yr, xr) in quads
        .into_remainder()
        .chunks_exact_mut(width)
        .zip(x_quads.remainder().chunks_exact(width))
    {
        op.inside[c].product_rows::<B, 1>([xr], &op.coupling, [yr]);
    }
    // The rest two rows at a time, so that the crossing tables are decoded
    // once for both; every row still receives its terms in the same order.
    let paired = ys.len() / (2 * width) * 2;
    let mut pairs = ys.chunks_exact_mut(2 * width);
    for (offset, y2) in (&mut pairs).enumerate() {
        let (y_a, y_b) = y2.split_at_mut(width);
        let row = first_row + 2 * offset;
        rows_outside::<B, 2>(
            op,
            step,
            panel,
            row,
            [y_a, y_b],
            &mut scratch.pairs,
            &mut sums,
        );
    }
    let rest = pairs.into_remainder();
    if !rest.is_empty() {
        let row = first_row + paired;
        rows_outside::<B, 1>(op, step, panel, row, [rest], &mut scratch.single, &mut sums);
    }
    sums
}

/// The buffers of the tasks one thread runs in one application (rayon's
/// `map_init` hands each split of the work its own, so they are allocated a
/// few times per application rather than once per task), for pairs of rows
/// and for a last single row.
#[derive(Default)]
struct TaskScratch<const B: usize> {
    pairs: Scratch<B, 2>,
    single: Scratch<B, 1>,
}

/// Reused buffers of R rows at a time: their gathered source rows, their
/// weights repeated per lane, and their crossing sums, the R rows side by
/// side in each.
#[derive(Default)]
struct Scratch<const B: usize, const R: usize> {
    gathered: Vec<[[f64; B]; R]>,
    crossed: Vec<[[f64; B]; R]>,
    weights: Vec<[[f64; B]; R]>,
}

/// For the R (≤ 2) consecutive rows `ys` of `panel` from row `row` on, whose
/// low-half terms are in already: the moves inside the high half, the
/// crossings between the halves, then the diagonal, the scaling and the
/// lane sums, row by row in basis order.
#[inline(always)]
fn rows_outside<const B: usize, const R: usize>(
    op: &SectorOperator,
    step: &Step<'_, B>,
    panel: Panel,
    row: usize,
    ys: [&mut [[f64; B]]; R],
    scratch: &mut Scratch<B, R>,
    sums: &mut [LaneSums; B],
) {
    let Step {
        x,
        scale,
        shift,
        back,
    } = *step;
    let n = op.sites;
    let lb = op.low_bits;
    let high_bits = n - lb;
    let c = panel.class;
    let width = panel.cols;
    let mut ys = ys;
    let hs: [u32; R] = std::array::from_fn(|r| op.high_words[op.sites_up_high(c)][row + r]);
    // Up spin p moves to an empty high site q: the row with the spin moved,
    // scaled, MOVES_PER_PASS rows per pass over y (each pass reads and
    // writes y once instead of once per source row).
    for (yr, &h) in ys.iter_mut().zip(&hs) {
        let mut moves: [(f64, &[[f64; B]]); MOVES_PER_PASS] = [(0.0, &[]); MOVES_PER_PASS];
        let mut count = 0;
        for p in (0..high_bits).filter(|&p| (h >> p) & 1 == 1) {
            let p_row = &op.coupling[(lb + p) * n..(lb + p + 1) * n];
            for q in (0..high_bits).filter(|&q| (h >> q) & 1 == 0) {
                let j = p_row[lb + q];
                if j == 0.0 {
                    continue;
                }
                moves[count] = (j, op.row::<B>(x, c, h ^ (1 << p) ^ (1 << q)));
                count += 1;
                if count == MOVES_PER_PASS {
                    add_scaled_rows(yr, &moves);
                    count = 0;
                }
            }
        }
        // At most MOVES_PER_PASS − 1 = 3 rows are left over.
        const { assert!(MOVES_PER_PASS == 4) };
        match count {
            0 => {}
            1 => add_scaled_rows::<B, 1>(yr, &[moves[0]]),
            2 => add_scaled_rows::<B, 2>(yr, &[moves[0], moves[1]]),
            _ => add_scaled_rows::<B, 3>(yr, &[moves[0], moves[1], moves[2]]),
        }
    }
    // One spin crosses between the halves: every high site p that can give
    // (take) a spin contributes the row of panel c + 1 (c − 1) with that
    // spin moved; the table of low sites is read once for all of them and
    // for all R rows (whose high halves have equally many up spins, so equal
    // source counts m). The first direction writes `crossed` and the second
    // adds to it; its columns hold the R rows side by side (contiguous for
    // the compiler's vectors), and the sum is added to every row in the
    // diagonal's pass.
    if scratch.crossed.len() < width {
        scratch.crossed.resize(width, [[0.0; B]; R]);
    }
    let mut crossed_any = false;
    for filled in [true, false] {
        let class = if filled { c + 1 } else { c.wrapping_sub(1) };
        if class > lb {
            continue;
        }
        let m = if filled {
            op.sites_up_high(c)
        } else {
            high_bits - op.sites_up_high(c)
        };
        if m == 0 {
            continue;
        }
        let cols = op.panels[op.panel_of_class[class].expect("valid class")].cols;
        let Scratch {
            gathered,
            crossed,
            weights,
        } = scratch;
        // The m source rows of every row of the pass, column by column.
        if gathered.len() < cols * m {
            gathered.resize(cols * m, [[0.0; B]; R]);
        }
        let gathered = &mut gathered[..cols * m];
        weights.clear();
        let mut slots = [(0, 0); R];
        let mut sources: [[&[[f64; B]]; MAX_HALF]; R] = [[&[]; MAX_HALF]; R];
        for (r, &h) in hs.iter().enumerate() {
            let sites = (0..high_bits).filter(|&p| ((h >> p) & 1 == 1) == filled);
            for (i, p) in sites.enumerate() {
                sources[r][i] = op.row::<B>(x, class, h ^ (1 << p));
            }
            let slot = 2 * h as usize + usize::from(filled);
            slots[r] = (op.crossing_start[slot], op.crossing_start[slot + 1]);
        }
        // Column by column, so that the stores run in order and the R·m
        // source rows are read as parallel streams.
        for (k, column) in gathered.chunks_exact_mut(m).enumerate() {
            for (i, group) in column.iter_mut().enumerate() {
                for (r, value) in group.iter_mut().enumerate() {
                    *value = sources[r][i][k];
                }
            }
        }
        let len = slots[0].1 - slots[0].0;
        weights.extend(
            (0..len).map(|k| std::array::from_fn(|r| [op.crossing_weights[slots[r].0 + k]; B])),
        );
        let table = if filled {
            &op.to_low[c]
        } else {
            &op.from_low[c]
        };
        table.add_crossing::<B, R>(gathered, m, weights, &mut crossed[..width], !crossed_any);
        crossed_any = true;
    }
    // No crossing at all only in a sector whose spins are all alike.
    if !crossed_any {
        scratch.crossed.clear();
        scratch.crossed.resize(width, [[0.0; B]; R]);
    }
    // The crossing sums, then the diagonal, the scaling and the lane sums.
    for (r, yr) in ys.iter_mut().enumerate() {
        let begin = panel.start + (row + r) * width;
        let xr = &x[begin..begin + width];
        let crossed = &scratch.crossed[..width];
        for (k, ((out, xv), sum)) in yr.iter_mut().zip(xr).zip(crossed).enumerate() {
            let a = begin + k;
            let d = op.diagonal[a] - shift;
            let z = back.map_or([0.0; B], |z| z[a]);
            for b in 0..B {
                let v = ((out[b] + sum[r][b]) + xv[b] * d) * scale - z[b];
                out[b] = v;
                sums[b].overlap += xv[b] * v;
                sums[b].norm_sq += v * v;
            }
        }
    }
}

/// Source rows added per pass over a row in the moves inside the high half.
const MOVES_PER_PASS: usize = 4;

/// y += Σ_i j_i x_i over the M (j_i, x_i) of `rows`, element by element,
/// the sum a balanced tree in the order given.
#[inline(always)]
fn add_scaled_rows<const B: usize, const M: usize>(
    y: &mut [[f64; B]],
    rows: &[(f64, &[[f64; B]]); M],
) {
    let sources: [&[[f64; B]]; M] = std::array::from_fn(|i| &rows[i].1[..y.len()]);
    for (k, out) in y.iter_mut().enumerate() {
        let terms: [[[f64; B]; 1]; M] =
            std::array::from_fn(|i| [std::array::from_fn(|b| rows[i].0 * sources[i][k][b])]);
        let [total] = pairwise_sum(terms);
        for b in 0..B {
            out[b] += total[b];
        }
    }
}

/// Per lane: ‖v‖², summed over a fixed partition in basis order.
pub(super) fn lane_norms<const B: usize>(v: &[[f64; B]]) -> [f64; B] {
    let partials: Vec<[f64; B]> = v
        .par_chunks(TASK_AMPLITUDES)
        .map(|chunk| {
            let mut sums = [0.0; B];
            for lanes in chunk {
                for (s, a) in sums.iter_mut().zip(lanes) {
                    *s += a * a;
                }
            }
            sums
        })
        .collect();
    let mut total = [0.0; B];
    for part in &partials {
        for (t, p) in total.iter_mut().zip(part) {
            *t += p;
        }
    }
    total
}

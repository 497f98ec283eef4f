//! The Hamiltonian of one magnetisation sector applied without being
//! stored, block by block over the upper half of the spin word, and the
//! vector operations of the Lanczos recurrence (module documentation of
//! `typicality`).

use super::*;

/// A complex amplitude (num-complex's `Complex64`: fields `re`, `im`); H is
/// real, so its real and imaginary parts share the decoding of every sparse
/// entry.
pub(super) type Amp = num_complex::Complex64;

/// The Hamiltonian of one sector, applied without being stored.
///
/// Every basis word splits into a low half (bits below `low_bits`) and a high
/// half. The combinatorial rank (see [`Sector`]) is the rank of the low half
/// among the low words with the same number c of set bits plus a share that
/// depends on the high half and c alone, so the words with one high half
/// form a contiguous block, ordered like the low words of class c (the
/// two-table indexing of H. Q. Lin, Phys. Rev. B 42, 6561 (1990), from
/// memory). A flip-flop moves an up spin p to an empty site q; by where p
/// and q lie, H splits into three parts, each applied block by block
/// without computing a rank per matrix element:
///
/// - both in the high half: block h meets block h' = h with the spin moved,
///   row for row (a scaled vector sum over the block);
/// - both in the low half: the same small sparse matrix of class c inside
///   every block (tabulated once per class);
/// - one in each half: block h meets the block with one more or one fewer
///   high bit, rows paired by a table per class and low site.
///
/// Only the diagonal (d values) and tables of the low words are stored: a
/// 20-site sector needs 1.5 MB instead of 74 MB of packed matrix entries.
#[derive(Debug)]
pub(super) struct SectorOperator {
    pub(super) diagonal: Vec<f64>,
    pub(super) sites: usize,
    pub(super) low_bits: u32,
    /// J_ij in row-major order (N × N, zero on the diagonal).
    pub(super) coupling: Vec<f64>,
    /// The blocks in basis order: (high word, class c, first row).
    pub(super) blocks: Vec<(u32, usize, usize)>,
    /// First row of the block of every high word (unused words: 0).
    pub(super) block_start: Vec<usize>,
    /// Per class c: the flip-flops inside the low half.
    pub(super) inside: Vec<RowTable>,
    /// Per class c and high site p: an up spin at p moves to any empty low
    /// site (columns in class c + 1).
    pub(super) to_low: Vec<Vec<RowTable>>,
    /// Per class c and high site p: an up spin of the low half moves to the
    /// empty site p (columns in class c − 1).
    pub(super) from_low: Vec<Vec<RowTable>>,
}

/// A small sparse matrix between two classes of low words, row by row:
/// row r holds (column r', J) for `entries[rows[r]..rows[r + 1]]`.
#[derive(Debug, Default)]
pub(super) struct RowTable {
    pub(super) rows: Vec<usize>,
    pub(super) entries: Vec<(u16, f64)>,
}

impl RowTable {
    /// Row by row over `words` (one class), the entries `of(word)` yields.
    pub(super) fn build(words: &[u32], of: impl Fn(u32) -> Vec<(u16, f64)>) -> Self {
        let mut rows = vec![0];
        let mut entries = Vec::new();
        for &w in words {
            entries.extend(of(w));
            rows.push(entries.len());
        }
        Self { rows, entries }
    }

    /// y_r += Σ J x_{r'} over the rows of y.
    #[inline]
    pub(super) fn add_product(&self, x: &[Amp], y: &mut [Amp]) {
        for (r, out) in y.iter_mut().enumerate() {
            let (mut re, mut im) = (0.0, 0.0);
            for &(r2, j) in &self.entries[self.rows[r]..self.rows[r + 1]] {
                let v = x[r2 as usize];
                re += j * v.re;
                im += j * v.im;
            }
            out.re += re;
            out.im += im;
        }
    }
}

impl SectorOperator {
    pub(super) fn build(chain: &SpinChain, sector: &Sector) -> Self {
        let n = sector.sites;
        let up = sector.up;
        let low_bits = (n / 2) as u32;
        let high_bits = n as u32 - low_bits;
        let mut coupling = vec![0.0; n * n];
        for term in chain.flip_terms() {
            let i = term.mask.trailing_zeros() as usize;
            let j = 31 - term.mask.leading_zeros() as usize;
            coupling[i * n + j] = term.amplitude;
            coupling[j * n + i] = term.amplitude;
        }
        // Low words by class, in increasing order (= their rank in the class).
        let mut words: Vec<Vec<u32>> = vec![Vec::new(); low_bits as usize + 1];
        for w in 0u32..1 << low_bits {
            words[w.count_ones() as usize].push(w);
        }
        let rank = |w: u32| rank_share(w, 0, 0) as u16;
        let lb = low_bits as usize;
        let low_sites = || 0..low_bits;
        let j_of = |a: usize, b: usize| coupling[a * n + b];
        let inside = words
            .iter()
            .map(|class| {
                RowTable::build(class, |w| {
                    let mut out = Vec::new();
                    for p in low_sites().filter(|&p| (w >> p) & 1 == 1) {
                        for q in low_sites().filter(|&q| (w >> q) & 1 == 0) {
                            let j = j_of(p as usize, q as usize);
                            if j != 0.0 {
                                out.push((rank(w ^ (1 << p) ^ (1 << q)), j));
                            }
                        }
                    }
                    out
                })
            })
            .collect();
        let cross = |leaving: bool| -> Vec<Vec<RowTable>> {
            words
                .iter()
                .map(|class| {
                    (0..high_bits as usize)
                        .map(|p| {
                            RowTable::build(class, |w| {
                                low_sites()
                                    .filter(|&q| ((w >> q) & 1 == 1) == leaving)
                                    .map(|q| (rank(w ^ (1 << q)), j_of(q as usize, lb + p)))
                                    .filter(|&(_, j)| j != 0.0)
                                    .collect()
                            })
                        })
                        .collect()
                })
                .collect()
        };
        let to_low = cross(false);
        let from_low = cross(true);
        let mut blocks = Vec::new();
        let mut block_start = vec![0usize; 1 << high_bits];
        for h in 0u32..1 << high_bits {
            let high_up = h.count_ones() as usize;
            if high_up > up || up - high_up > low_bits as usize {
                continue;
            }
            let class = up - high_up;
            let start = rank_share(h, low_bits, class as u32);
            block_start[h as usize] = start;
            blocks.push((h, class, start));
        }
        blocks.sort_by_key(|&(_, _, start)| start);
        let diagonal = sector
            .states
            .par_iter()
            .map(|&s| chain.diagonal_energy(s))
            .collect();
        Self {
            diagonal,
            sites: n,
            low_bits,
            coupling,
            blocks,
            block_start,
            inside,
            to_low,
            from_low,
        }
    }

    /// Position of a word of this sector in its basis.
    #[cfg(test)]
    pub(super) fn index_of(&self, state: u32) -> usize {
        let low = state & ((1 << self.low_bits) - 1);
        let high = state >> self.low_bits;
        self.block_start[high as usize] + rank_share(low, 0, 0)
    }

    /// y_block += (H − diagonal) x on the rows of one block.
    pub(super) fn off_diagonal_block(&self, h: u32, class: usize, x: &[Amp], y: &mut [Amp]) {
        let n = self.sites;
        let lb = self.low_bits as usize;
        let high_bits = n - lb;
        // Low half: the class's sparse matrix, inside the block.
        let start = self.block_start[h as usize];
        let len = y.len();
        self.inside[class].add_product(&x[start..start + len], y);
        for p in 0..high_bits {
            let p_site = lb + p;
            if (h >> p) & 1 == 1 {
                // Up spin p in the high half moves to an empty high site q.
                for q in (0..high_bits).filter(|&q| (h >> q) & 1 == 0) {
                    let j = self.coupling[p_site * n + lb + q];
                    if j == 0.0 {
                        continue;
                    }
                    let other = self.block_start[(h ^ (1 << p) ^ (1 << q)) as usize];
                    for (out, v) in y.iter_mut().zip(&x[other..other + len]) {
                        out.re += j * v.re;
                        out.im += j * v.im;
                    }
                }
                // ... or to an empty low site: one more low bit.
                let other = self.block_start[(h ^ (1 << p)) as usize];
                self.to_low[class][p].add_product(&x[other..], y);
            } else if class > 0 {
                // An up spin of the low half moves to the empty high site p.
                let other = self.block_start[(h | (1 << p)) as usize];
                self.from_low[class][p].add_product(&x[other..], y);
            }
        }
    }

    /// y = H x − b·z for the optional pair (b, z) (the Lanczos recurrence's
    /// previous vector, folded into the same pass over memory). Returns
    /// Re⟨x|y⟩, summed block by block in basis order so that it does not
    /// depend on the thread count.
    pub(super) fn apply(&self, x: &[Amp], y: &mut [Amp], back: Option<(f64, &[Amp])>) -> f64 {
        let mut pieces = Vec::with_capacity(self.blocks.len());
        let mut rest = y;
        for &(_, class, _) in &self.blocks {
            let len = binomial(self.low_bits as usize, class);
            let (head, tail) = std::mem::take(&mut rest).split_at_mut(len);
            pieces.push(head);
            rest = tail;
        }
        let partials: Vec<f64> = pieces
            .into_par_iter()
            .zip(self.blocks.par_iter())
            .with_min_len(BLOCKS_PER_TASK)
            .map(|(ys, &(h, class, start))| {
                for (offset, out) in ys.iter_mut().enumerate() {
                    let a = start + offset;
                    let diag = self.diagonal[a];
                    *out = Amp {
                        re: diag * x[a].re,
                        im: diag * x[a].im,
                    };
                    if let Some((b, z)) = back {
                        out.re -= b * z[a].re;
                        out.im -= b * z[a].im;
                    }
                }
                self.off_diagonal_block(h, class, x, ys);
                ys.iter()
                    .zip(&x[start..])
                    .map(|(h, x)| x.re * h.re + x.im * h.im)
                    .sum::<f64>()
            })
            .collect();
        partials.iter().sum()
    }
}

/// w ← w − α q, returning ‖w‖ (block sums in block order).
pub(super) fn orthogonalise(w: &mut [Amp], q: &[Amp], alpha: f64) -> f64 {
    let partials: Vec<f64> = w
        .par_chunks_mut(ROWS_PER_TASK)
        .zip(q.par_chunks(ROWS_PER_TASK))
        .map(|(ws, qs)| {
            let mut sum = 0.0;
            for (x, q) in ws.iter_mut().zip(qs) {
                x.re -= alpha * q.re;
                x.im -= alpha * q.im;
                sum += x.re * x.re + x.im * x.im;
            }
            sum
        })
        .collect();
    partials.iter().sum::<f64>().sqrt()
}

/// out ← v / s, in parallel.
pub(super) fn scaled_copy(out: &mut [Amp], v: &[Amp], s: f64) {
    out.par_chunks_mut(ROWS_PER_TASK)
        .zip(v.par_chunks(ROWS_PER_TASK))
        .for_each(|(os, vs)| {
            for (o, x) in os.iter_mut().zip(vs) {
                *o = Amp {
                    re: x.re / s,
                    im: x.im / s,
                };
            }
        });
}

/// Σ_q C(offset + c_q, before + q) over the set bits c_1 < c_2 < … of `word`:
/// the share of the combinatorial rank carried by bits that sit `offset`
/// places higher in the full word, with `before` set bits below them.
pub(super) fn rank_share(word: u32, offset: u32, before: u32) -> usize {
    let mut rank = 0;
    let mut rest = word;
    let mut p = before as usize + 1;
    while rest != 0 {
        rank += binomial((rest.trailing_zeros() + offset) as usize, p);
        p += 1;
        rest &= rest - 1;
    }
    rank
}

pub(super) fn norm(v: &[Amp]) -> f64 {
    v.iter()
        .map(|a| a.re * a.re + a.im * a.im)
        .sum::<f64>()
        .sqrt()
}

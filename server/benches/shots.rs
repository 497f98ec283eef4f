//! Benchmark of shot-file ingest and the correlation estimator against the
//! target of issue 5: 10⁶ shots on 40 sites parsed and estimated (200
//! bootstrap replicates) in ≤ 10 s on 2 cores, with memory independent of
//! the file size.
//!
//! The shots are SYNTHETIC: random bits from a seeded SplitMix64 generator
//! (Steele, Lea & Flood, OOPSLA 2014), no physics. They are produced line by
//! line by a `Read` implementation and streamed into the CSV parser, so the
//! text is never held: peak memory is the parser's counters and the
//! estimator's work arrays. The generator's own cost is timed separately and
//! subtracted.
//!
//! Run (release, the default for `cargo bench`):
//!   cargo bench --bench shots
//!   cargo bench --bench shots -- 1000000 40 2000 50   # shots sites states times
//! Peak resident memory, measured from outside:
//!   /usr/bin/time -v target/release/deps/shots-* --bench
//!
//! This is a timing program, never a test: it asserts nothing about speed.

use std::io::{BufReader, Read};
use std::time::Instant;

use spreadscope::ingest::shots::parse_csv;
use spreadscope_physics::model::shots::{EstimateOptions, SourceWindow, estimate};

/// SplitMix64: a seeded 64-bit generator, ample for synthetic bits.
struct SplitMix(u64);

impl SplitMix {
    fn next(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }
}

/// Writes `shots` CSV rows on demand: shot k belongs to state k mod
/// `states` and time (k / states) mod `times`, so every (state, time) gets
/// shots / (states · times) shots.
struct Shots {
    shots: usize,
    sites: usize,
    states: usize,
    times: usize,
    next: usize,
    rng: SplitMix,
    init: Vec<Vec<u8>>,
    line: Vec<u8>,
    pos: usize,
}

impl Shots {
    fn new(shots: usize, sites: usize, states: usize, times: usize) -> Self {
        let mut rng = SplitMix(2024);
        let init = (0..states)
            .map(|_| (0..sites).map(|_| b'0' + (rng.next() & 1) as u8).collect())
            .collect();
        // The header is the first "line" handed out.
        let line = b"state_id,t,init_bits,meas_bits\n".to_vec();
        Self {
            shots,
            sites,
            states,
            times,
            next: 0,
            rng,
            init,
            line,
            pos: 0,
        }
    }

    fn fill(&mut self) {
        let k = self.next;
        let state = k % self.states;
        let time = (k / self.states) % self.times;
        self.line.clear();
        self.line
            .extend_from_slice(format!("s{state},{},", time as f64 * 0.25).as_bytes());
        self.line.extend_from_slice(&self.init[state]);
        self.line.push(b',');
        let mut bits = 0u64;
        for i in 0..self.sites {
            if i % 64 == 0 {
                bits = self.rng.next();
            }
            self.line.push(b'0' + (bits & 1) as u8);
            bits >>= 1;
        }
        self.line.push(b'\n');
        self.pos = 0;
        self.next += 1;
    }
}

impl Read for Shots {
    fn read(&mut self, out: &mut [u8]) -> std::io::Result<usize> {
        if self.pos == self.line.len() {
            if self.next == self.shots {
                return Ok(0);
            }
            self.fill();
        }
        let n = out.len().min(self.line.len() - self.pos);
        out[..n].copy_from_slice(&self.line[self.pos..self.pos + n]);
        self.pos += n;
        Ok(n)
    }
}

fn main() {
    let args: Vec<usize> = std::env::args()
        .skip(1)
        .filter_map(|a| a.parse().ok())
        .collect();
    let arg = |i: usize, default: usize| args.get(i).copied().unwrap_or(default);
    let (shots, sites, states, times) = (arg(0, 1_000_000), arg(1, 40), arg(2, 2000), arg(3, 50));
    println!(
        "shots bench: {shots} shots, {sites} sites, {states} states × {times} times, \
         {} cores available",
        cores()
    );

    let start = Instant::now();
    let mut sink = Vec::with_capacity(1 << 16);
    let mut generator = BufReader::new(Shots::new(shots, sites, states, times));
    let mut bytes = 0usize;
    loop {
        sink.clear();
        let n = (&mut generator)
            .take(1 << 16)
            .read_to_end(&mut sink)
            .expect("in-memory generator");
        if n == 0 {
            break;
        }
        bytes += n;
    }
    let generate = start.elapsed().as_secs_f64();
    println!(
        "  generating the text alone: {generate:.3} s ({:.0} MB)",
        bytes as f64 / 1e6
    );

    let start = Instant::now();
    let ingested = parse_csv(BufReader::new(Shots::new(shots, sites, states, times)))
        .expect("synthetic shots are valid");
    let parse = start.elapsed().as_secs_f64() - generate;
    println!(
        "  parse (streamed, generation subtracted): {parse:.3} s; counters held: {}",
        ingested.records.counter_len()
    );

    let options = EstimateOptions {
        window: SourceWindow::Bulk {
            first: sites / 4,
            last: 3 * sites / 4,
        },
        ..EstimateOptions::default()
    };
    let start = Instant::now();
    let result = estimate(&ingested.records, &options).expect("estimate");
    let est = start.elapsed().as_secs_f64();
    println!(
        "  estimate ({} replicates, bulk window): {est:.3} s; map {} times × {} offsets",
        options.replicates,
        result.map.n_times(),
        result.map.n_sites()
    );
    println!(
        "  parse + estimate: {:.3} s (target ≤ 10 s on 2 cores)",
        parse + est
    );
}

fn cores() -> usize {
    std::thread::available_parallelism().map_or(1, usize::from)
}

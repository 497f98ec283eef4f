//! The CSV shot layout, streamed line by line: columns
//! `state_id,t,init_bits,meas_bits` (see the `shots` module documentation
//! for every rule). Memory is that of the per-(state, time) counters and the
//! state names, never that of the text.

use std::collections::HashMap;
use std::io::{BufRead, Read};

use spreadscope_physics::model::shots::{MAX_SITES, ShotAccumulator};

use super::{ShotsIngested, one_problem, summary_note};
use crate::ingest::grid;
use crate::ingest::{BOM, IngestError, Problems};

/// The longest CSV line accepted: a row of a 4096-site chain is about 8 kB,
/// so anything near this is not a shot row, and holding it would defeat the
/// streaming.
pub const MAX_LINE_BYTES: usize = 1 << 20;

/// The meaning of a CSV column.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Column {
    State,
    Time,
    Init,
    Meas,
}

impl Column {
    const ALL: [Self; 4] = [Self::State, Self::Time, Self::Init, Self::Meas];

    fn name(self) -> &'static str {
        match self {
            Self::State => "state_id",
            Self::Time => "t",
            Self::Init => "init_bits",
            Self::Meas => "meas_bits",
        }
    }

    /// The column a header name stands for (case-insensitive, surrounding
    /// white space ignored): `state_id`, `state`, `state_index`; `t`,
    /// `time`; `init_bits`, `init`, `initial_bits`, `initial`; `meas_bits`,
    /// `meas`, `measured_bits`, `bits`, `outcome`.
    #[must_use]
    pub fn of(name: &str) -> Option<Self> {
        match name.trim().to_lowercase().as_str() {
            "state_id" | "state" | "state_index" => Some(Self::State),
            "t" | "time" => Some(Self::Time),
            "init_bits" | "init" | "initial_bits" | "initial" => Some(Self::Init),
            "meas_bits" | "meas" | "measured_bits" | "bits" | "outcome" => Some(Self::Meas),
            _ => None,
        }
    }
}

/// Where each column sits in a row.
#[derive(Debug, Clone, Copy)]
struct Layout {
    delimiter: char,
    fields: usize,
    state: usize,
    time: usize,
    init: usize,
    meas: usize,
}

impl Layout {
    const DEFAULT_ORDER: &'static str = "state_id,t,init_bits,meas_bits";

    fn positional(delimiter: char) -> Self {
        Self {
            delimiter,
            fields: 4,
            state: 0,
            time: 1,
            init: 2,
            meas: 3,
        }
    }
}

fn unquote(cell: &str) -> &str {
    let cell = cell.trim();
    cell.strip_prefix('"')
        .and_then(|c| c.strip_suffix('"'))
        .unwrap_or(cell)
}

fn detect_delimiter(line: &str) -> char {
    [',', '\t', ';']
        .into_iter()
        .find(|d| line.contains(*d))
        .unwrap_or(',')
}

/// Reads lines of at most [`MAX_LINE_BYTES`] from a `BufRead`, reusing one
/// buffer; longer lines are skipped and reported.
struct Lines<R> {
    reader: R,
    buf: Vec<u8>,
    line: usize,
}

enum NextLine {
    End,
    Text,
    Overlong,
}

impl<R: BufRead> Lines<R> {
    fn next(&mut self) -> std::io::Result<NextLine> {
        self.buf.clear();
        let limit = MAX_LINE_BYTES as u64 + 1;
        let n = (&mut self.reader)
            .take(limit)
            .read_until(b'\n', &mut self.buf)?;
        if n == 0 {
            return Ok(NextLine::End);
        }
        self.line += 1;
        if self.buf.last() != Some(&b'\n') && self.buf.len() > MAX_LINE_BYTES {
            // Discard the rest of the line without holding it.
            loop {
                self.buf.clear();
                let n = (&mut self.reader)
                    .take(limit)
                    .read_until(b'\n', &mut self.buf)?;
                if n == 0 || self.buf.last() == Some(&b'\n') {
                    break;
                }
            }
            self.buf.clear();
            return Ok(NextLine::Overlong);
        }
        while matches!(self.buf.last(), Some(b'\n' | b'\r')) {
            self.buf.pop();
        }
        if self.line == 1 && self.buf.starts_with(BOM) {
            self.buf.drain(..BOM.len());
        }
        Ok(NextLine::Text)
    }
}

/// The state of a CSV parse between rows.
struct CsvState {
    problems: Problems,
    layout: Option<Layout>,
    /// Chain length and the line that fixed it.
    sites: Option<(usize, usize)>,
    acc: Option<ShotAccumulator>,
    /// State name → (index, first line).
    states: HashMap<Box<str>, (usize, usize)>,
    /// Initial bits of states seen while the accumulator could not be made
    /// (so later rows can still be compared), by index.
    pending_init: Vec<Vec<u8>>,
    last_state: Option<(Box<str>, usize)>,
    data_rows: usize,
}

impl CsvState {
    fn new() -> Self {
        Self {
            problems: Problems::default(),
            layout: None,
            sites: None,
            acc: None,
            states: HashMap::new(),
            pending_init: Vec::new(),
            last_state: None,
            data_rows: 0,
        }
    }

    /// Reads the header (or decides there is none) from the first content
    /// line; returns `true` when the line was a header.
    fn header(&mut self, text: &str, line: usize) -> bool {
        let delimiter = detect_delimiter(text);
        let cells: Vec<&str> = text.split(delimiter).map(unquote).collect();
        let looks_like_data =
            cells.len() == 4 && grid::number_from_text(cells[1]).is_ok() && !cells[2].is_empty();
        if looks_like_data {
            self.layout = Some(Layout::positional(delimiter));
            return false;
        }
        let mut slots: [Option<usize>; 4] = [None; 4];
        for (index, cell) in cells.iter().enumerate() {
            match Column::of(cell) {
                Some(column) => {
                    let slot = &mut slots[column as usize];
                    if let Some(first) = slot {
                        self.problems.at(
                            line,
                            format!(
                                "header: columns {} and {} both mean `{}`",
                                *first + 1,
                                index + 1,
                                column.name()
                            ),
                        );
                    } else {
                        *slot = Some(index);
                    }
                }
                None => self.problems.at(
                    line,
                    format!(
                        "header: unknown column `{cell}` (expected {})",
                        Layout::DEFAULT_ORDER
                    ),
                ),
            }
        }
        for column in Column::ALL {
            if slots[column as usize].is_none() {
                self.problems
                    .at(line, format!("header: no `{}` column", column.name()));
            }
        }
        if let [Some(state), Some(time), Some(init), Some(meas)] = slots {
            self.layout = Some(Layout {
                delimiter,
                fields: cells.len(),
                state,
                time,
                init,
                meas,
            });
        }
        true
    }

    /// Checks a bit string; `Err` is the reason.
    fn bits_problem(&self, what: Column, bits: &str) -> Option<String> {
        if bits.is_empty() {
            return Some(format!("{} is empty", what.name()));
        }
        if let Some((pos, c)) = bits
            .chars()
            .enumerate()
            .find(|(_, c)| !matches!(c, '0' | '1'))
        {
            return Some(format!(
                "{} `{}` has `{c}` at position {}; bits are 0 or 1",
                what.name(),
                shorten(bits),
                pos + 1
            ));
        }
        let (sites, first_line) = self.sites?;
        (bits.len() != sites).then(|| {
            let hint = if bits.len() < sites && bits.starts_with('1') {
                " (leading zeros lost, e.g. by a spreadsheet?)"
            } else {
                ""
            };
            format!(
                "{} has {} bits but the first data row (line {first_line}) has {sites}{hint}",
                what.name(),
                bits.len()
            )
        })
    }

    fn row(&mut self, text: &str, line: usize) {
        let Some(layout) = self.layout else {
            return;
        };
        self.data_rows += 1;
        let cells: Vec<&str> = text.split(layout.delimiter).map(unquote).collect();
        if cells.len() != layout.fields {
            let kind = if cells.len() < layout.fields {
                "missing fields"
            } else {
                "extra fields"
            };
            self.problems.at(
                line,
                format!(
                    "{kind}: expected {} fields, found {}",
                    layout.fields,
                    cells.len()
                ),
            );
            return;
        }
        let (name, t_text, init, meas) = (
            cells[layout.state],
            cells[layout.time],
            cells[layout.init],
            cells[layout.meas],
        );
        let mut ok = true;
        if name.is_empty() {
            self.problems.at(line, "state_id is empty");
            ok = false;
        }
        let t = match grid::checked_from_text(t_text, grid::time_value) {
            Ok(t) => Some(t),
            Err(reason) => {
                self.problems.at(line, format!("t {reason}"));
                ok = false;
                None
            }
        };
        // The first row with a clean initial bit string fixes the length.
        if self.sites.is_none() && self.bits_problem(Column::Init, init).is_none() {
            self.sites = Some((init.len(), line));
            if init.len() > MAX_SITES {
                self.problems.at(
                    line,
                    format!(
                        "init_bits has {} bits; at most {MAX_SITES} sites are supported",
                        init.len()
                    ),
                );
            } else {
                self.acc = ShotAccumulator::new(init.len()).ok();
            }
        }
        let init_ok = match self.bits_problem(Column::Init, init) {
            Some(reason) => {
                self.problems.at(line, reason);
                false
            }
            None => true,
        };
        if let Some(reason) = self.bits_problem(Column::Meas, meas) {
            self.problems.at(line, reason);
            ok = false;
        }
        // A state is registered (so later rows can be compared with it)
        // whenever its name and initial bits are readable; the shot is
        // counted only while the file is free of problems, since a file with
        // any problem is rejected whole anyway.
        if name.is_empty() || !init_ok {
            return;
        }
        let Some(state) = self.state_index(name, init, line) else {
            return;
        };
        if !ok || !self.problems.is_empty() {
            return;
        }
        if let (Some(acc), Some(t)) = (self.acc.as_mut(), t) {
            if let Err(e) = acc.add_shot(state, t, meas.as_bytes()) {
                self.problems.at(line, e.to_string());
            }
        }
    }

    /// The index of state `name`, declaring it on first sight; `None` (with a
    /// problem) when its initial bits differ from its first row's.
    fn state_index(&mut self, name: &str, init: &str, line: usize) -> Option<usize> {
        let known = match &self.last_state {
            Some((last, index)) if **last == *name => Some(*index),
            _ => self.states.get(name).map(|&(index, _)| index),
        };
        if let Some(index) = known {
            let stored: &[u8] = match &self.acc {
                Some(acc) => acc.initial_bits(index).unwrap_or_default(),
                None => self.pending_init.get(index).map_or(&[], Vec::as_slice),
            };
            let same = stored.len() == init.len()
                && stored.iter().zip(init.bytes()).all(|(a, b)| a & 1 == b & 1);
            if !same {
                let first = self.states.get(name).map_or(0, |&(_, l)| l);
                let before: String = stored.iter().map(|b| char::from(b'0' + (b & 1))).collect();
                self.problems.at(
                    line,
                    format!(
                        "state `{}` has initial bits {} here but {} on line {first}",
                        shorten(name),
                        shorten(init),
                        shorten(&before)
                    ),
                );
                return None;
            }
            self.last_state = Some((name.into(), index));
            return Some(index);
        }
        let index = match self.acc.as_mut() {
            Some(acc) => match acc.add_state(init.as_bytes()) {
                Ok(index) => index,
                Err(e) => {
                    self.problems.at(line, e.to_string());
                    return None;
                }
            },
            None => {
                self.pending_init
                    .push(init.bytes().map(|b| b & 1).collect());
                self.pending_init.len() - 1
            }
        };
        self.states.insert(name.into(), (index, line));
        self.last_state = Some((name.into(), index));
        Some(index)
    }
}

/// A long value cut for a message.
fn shorten(text: &str) -> String {
    const KEEP: usize = 48;
    if text.chars().count() <= KEEP {
        text.to_string()
    } else {
        let head: String = text.chars().take(KEEP).collect();
        format!("{head}…")
    }
}

/// Parses a CSV shot file streamed from `reader`. See the module
/// documentation for the layout.
///
/// # Errors
/// Every problem found (at most [`MAX_PROBLEMS`](crate::ingest::MAX_PROBLEMS)), each
/// with its line.
pub fn parse_csv<R: BufRead>(reader: R) -> Result<ShotsIngested, IngestError> {
    let mut lines = Lines {
        reader,
        buf: Vec::new(),
        line: 0,
    };
    let mut state = CsvState::new();
    let mut seen_content = false;
    loop {
        let next = match lines.next() {
            Ok(next) => next,
            Err(e) => {
                state.problems.general(format!(
                    "the input could not be read after line {}: {e}",
                    lines.line
                ));
                break;
            }
        };
        let line = lines.line;
        match next {
            NextLine::End => break,
            NextLine::Overlong => {
                state.problems.at(
                    line,
                    format!("the line is longer than {MAX_LINE_BYTES} bytes"),
                );
                continue;
            }
            NextLine::Text => {}
        }
        let Ok(text) = std::str::from_utf8(&lines.buf) else {
            state.problems.at(line, "the line is not valid UTF-8 text");
            continue;
        };
        let trimmed = text.trim();
        if trimmed.is_empty() || trimmed.starts_with('#') {
            continue;
        }
        if !seen_content {
            seen_content = true;
            if state.header(trimmed, line) {
                continue;
            }
        }
        state.row(trimmed, line);
    }
    if !seen_content {
        state
            .problems
            .general("the file holds no shots (it is empty)");
    } else if state.data_rows == 0 && state.layout.is_some() {
        state
            .problems
            .general("the file has a header but no shot rows");
    }
    let CsvState {
        problems,
        acc,
        states,
        ..
    } = state;
    problems.check()?;
    let acc = acc.ok_or_else(|| one_problem("the file holds no shots"))?;
    let records = acc.finish().map_err(|e| one_problem(e.to_string()))?;
    let mut state_names = vec![String::new(); records.n_states()];
    for (name, (index, _)) in states {
        if let Some(slot) = state_names.get_mut(index) {
            *slot = name.into();
        }
    }
    Ok(ShotsIngested {
        notes: vec![summary_note(&records)],
        state_names,
        records,
    })
}

#[cfg(test)]
mod tests {
    use std::io::{BufReader, Read};

    use spreadscope_physics::model::shots::{EstimateOptions, SourceWindow, estimate};
    use spreadscope_physics::tolerance::close;

    use super::super::fixtures::CSV;
    use super::*;
    use crate::ingest::Problem;

    fn accept(text: &str) -> ShotsIngested {
        match parse_csv(text.as_bytes()) {
            Ok(ok) => ok,
            Err(e) => panic!("expected acceptance, got {:?}", e.problems),
        }
    }

    fn refuse(text: &[u8]) -> Vec<Problem> {
        match parse_csv(text) {
            Ok(ok) => panic!("expected refusal, got {:?}", ok.records),
            Err(e) => e.problems,
        }
    }

    #[test]
    fn csv_fixture_is_read_with_its_counts() {
        let ok = parse_csv(CSV).expect("fixture");
        let r = &ok.records;
        assert_eq!((r.sites(), r.n_states(), r.total_shots()), (6, 5, 30));
        assert_eq!(r.times(), &[0.0, 0.5, 1.25]);
        // Line 3 of the fixture: s3,1.25,001001,111101 — state s3 was the
        // first seen, so it has index 0.
        assert_eq!(ok.state_names[0], "s3");
        assert_eq!(r.initial_bits(0), Some(&[0u8, 0, 1, 0, 0, 1][..]));
        assert!(ok.notes[0].contains("30 shots of 5 initial states at 3 times on 6 sites"));
    }

    #[test]
    fn csv_header_aliases_order_delimiters_bom_and_crlf() {
        // Columns reordered under aliases, `;` delimiter, BOM, CRLF,
        // comments and blank lines; counts by hand: state a (bits 10) has
        // 2 shots at t = 0.5 reading 10 and 11 → ups (2, 1).
        let text = "\u{feff}# synthetic\r\nmeas;Time;STATE;initial\r\n\r\n10;0.5;a;10\r\n\
                    11;0.5;a;10\r\n01;0.5;b;01\r\n# end\r\n";
        let ok = accept(text);
        let r = &ok.records;
        assert_eq!((r.sites(), r.n_states(), r.total_shots()), (2, 2, 3));
        assert_eq!(r.counts(0, 0), Some((2, &[2u32, 1][..])));
        assert_eq!(ok.state_names, vec!["a".to_string(), "b".to_string()]);
        // No header: the documented column order; tabs; quoted cells.
        let ok = accept("\"x\"\t0\t\"0011\"\t0111\nx\t2.5e-1\t0011\t0011\n");
        assert_eq!(ok.records.times(), &[0.0, 0.25]);
    }

    #[test]
    fn every_bad_row_kind_is_refused_with_its_line() {
        let text = "state_id,t,init_bits,meas_bits\n\
                    a,0,0101,0101\n\
                    a,0.5,0101\n\
                    a,0.5,0101,0101,9\n\
                    b,0.5,01x1,0101\n\
                    b,0.5,0101,012\n\
                    c,0.5,010,0101\n\
                    c,0.5,0101,01011\n\
                    d,inf,0101,0101\n\
                    d,nan,0101,0101\n\
                    d,-1,0101,0101\n\
                    d,soon,0101,0101\n\
                    ,0.5,0101,0101\n\
                    a,1.0,1101,0101\n";
        let problems = refuse(text.as_bytes());
        let got: Vec<(Option<usize>, &str)> = problems
            .iter()
            .map(|p| (p.line, p.reason.as_str()))
            .collect();
        let want_prefix: [(usize, &str); 13] = [
            (3, "missing fields: expected 4 fields, found 3"),
            (4, "extra fields: expected 4 fields, found 5"),
            (5, "init_bits `01x1` has `x` at position 3; bits are 0 or 1"),
            (6, "meas_bits `012` has `2` at position 3"),
            (
                7,
                "init_bits has 3 bits but the first data row (line 2) has 4",
            ),
            (
                8,
                "meas_bits has 5 bits but the first data row (line 2) has 4",
            ),
            (9, "t `inf` is not a finite number"),
            (10, "t `nan` is not a finite number"),
            (11, "t `-1` is negative"),
            (12, "t `soon` is not a number"),
            (13, "state_id is empty"),
            (
                14,
                "state `a` has initial bits 1101 here but 0101 on line 2",
            ),
            (0, ""),
        ];
        assert_eq!(got.len(), 12, "{got:#?}");
        for ((line, reason), (want_line, prefix)) in got.iter().zip(want_prefix) {
            assert_eq!(*line, Some(want_line), "{reason}");
            assert!(reason.starts_with(prefix), "line {want_line}: {reason}");
        }
    }

    #[test]
    fn header_text_and_size_problems_are_named() {
        let problems = refuse(b"state,t,bits,weight\na,0,01,01\n");
        assert_eq!(problems[0].line, Some(1));
        assert!(
            problems[0].reason.contains("unknown column `weight`"),
            "{problems:?}"
        );
        assert!(
            problems[1].reason.contains("no `init_bits` column"),
            "{problems:?}"
        );
        assert!(refuse(b"")[0].reason.contains("empty"));
        assert!(refuse(b"# only a comment\n\n")[0].reason.contains("empty"));
        assert!(
            refuse(b"state_id,t,init_bits,meas_bits\n")[0]
                .reason
                .contains("no shot rows")
        );
        let problems = refuse(b"a,0,01,01\nb,0,\xff1,01\n");
        assert_eq!(problems[0].line, Some(2));
        assert!(problems[0].reason.contains("UTF-8"));
        // Leading zeros dropped by a spreadsheet get a hint.
        let problems = refuse(b"a,0,0101,0101\nb,0,101,0101\n");
        assert!(problems[0].reason.contains("leading zeros"), "{problems:?}");
    }

    #[test]
    fn an_overlong_line_is_skipped_and_named() {
        let mut text = b"a,0,01,01\nb,0,".to_vec();
        text.extend(std::iter::repeat_n(b'0', MAX_LINE_BYTES + 10));
        text.extend(b",01\nc,0,10,10\n");
        let problems = refuse(&text);
        assert_eq!(problems.len(), 1, "{problems:?}");
        assert_eq!(problems[0].line, Some(2));
        assert!(problems[0].reason.contains("longer than"));
    }

    #[test]
    fn problems_are_capped_with_a_count_of_the_rest() {
        let mut text = String::from("a,0,01,01\n");
        for _ in 0..250 {
            text.push_str("a,0,01,0x\n");
        }
        let problems = refuse(text.as_bytes());
        assert_eq!(problems.len(), crate::ingest::MAX_PROBLEMS);
        // 250 bad rows, 99 listed with their lines: 151 more.
        assert_eq!(problems[98].line, Some(100));
        assert_eq!(problems[99].reason, "…and 151 more problems");
    }

    /// A reader that writes `rows` CSV shot rows on demand, never holding
    /// more than one row: 8 states × 4 times on 12 sites.
    struct Generated {
        rows: usize,
        next: usize,
        pending: Vec<u8>,
    }

    impl Read for Generated {
        fn read(&mut self, out: &mut [u8]) -> std::io::Result<usize> {
            if self.pending.is_empty() {
                if self.next == self.rows {
                    return Ok(0);
                }
                let k = self.next;
                let (state, time) = (k % 8, (k / 8) % 4);
                let init: String = (0..12)
                    .map(|i| {
                        if (state >> (i % 3)) & 1 == 1 {
                            '1'
                        } else {
                            '0'
                        }
                    })
                    .collect();
                let meas: String = (0..12)
                    .map(|i| if (k + i) % 3 == 0 { '1' } else { '0' })
                    .collect();
                self.pending =
                    format!("s{state},{},{init},{meas}\n", time as f64 * 0.5).into_bytes();
                self.next += 1;
            }
            let n = out.len().min(self.pending.len());
            out[..n].copy_from_slice(&self.pending[..n]);
            self.pending.drain(..n);
            Ok(n)
        }
    }

    #[test]
    fn streamed_input_keeps_counters_per_state_time_and_site_only() {
        // 32 rows or 200 000 rows of the same 8 states × 4 times: the
        // records hold 8 · 4 · 12 counters either way.
        for rows in [32, 200_000] {
            let reader = BufReader::with_capacity(
                4096,
                Generated {
                    rows,
                    next: 0,
                    pending: Vec::new(),
                },
            );
            let ok = parse_csv(reader).expect("generated rows are valid");
            assert_eq!(ok.records.total_shots(), rows as u64);
            assert_eq!(ok.records.counter_len(), 8 * 4 * 12);
        }
    }

    #[test]
    fn parsed_csv_feeds_the_estimator() {
        // The hand-made example of the estimator's own tests, as CSV:
        // numpy 2.4.6 np.cov(X[:, 0], S[:, 1], ddof=1)[0, 1] = −0.9.
        let text = "state_id,t,init_bits,meas_bits\n\
                    p,1.5,00,10\np,1.5,00,00\nq,1.5,01,01\n\
                    r,1.5,10,11\nr,1.5,10,10\nr,1.5,10,11\n\
                    u,1.5,11,00\nu,1.5,11,01\n\
                    v,1.5,10,10\nv,1.5,10,10\nv,1.5,10,00\nv,1.5,10,11\n";
        let ok = accept(text);
        let est = estimate(
            &ok.records,
            &EstimateOptions {
                window: SourceWindow::Single(1),
                ..EstimateOptions::default()
            },
        )
        .expect("estimate");
        assert!(close(est.pairs.values[(0, 0, 1)], -0.9, 1e-13, 0.0));
        // x = −1 from source 1 is C_01.
        let xi = est.map.column_of(-1).expect("x = −1");
        assert!(close(est.map.values()[(0, xi)], -0.9, 1e-13, 0.0));
    }
}

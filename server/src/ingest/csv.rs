//! CSV (and TSV, semicolon- or space-separated text) correlation maps.
//!
//! Owns two layouts, told apart by the header row:
//! - long: one point per row, columns `x,t,C[,err]` in any order under
//!   tolerant names (see [`Role`]); unknown columns are ignored with a note;
//! - wide: the header's first cell is empty or `t`, `time`, `t\x` (or `t/x`)
//!   and the other cells are integer offsets; each row is one time, the first
//!   cell the time and the others C at those offsets; an empty cell is a
//!   missing point. The wide layout carries no errors: use the long layout
//!   with an `err` column for them.
//!
//! Text rules: UTF-8 (a byte order mark is skipped), LF or CRLF line ends,
//! the delimiter (tab, semicolon, comma, else runs of white space) taken from
//! the header row, cells trimmed and stripped of surrounding double quotes,
//! `#` starting a comment anywhere on a line, blank lines skipped. Comment
//! lines `# key: value` before the header fill [`DatasetMeta`] for the keys
//! platform, alpha, nearest_neighbour, chain_length, source_site,
//! source_window (`A:B`), symmetrised, time_unit, notes and synthetic. Lines are counted from 1 over every line of the file.
//!
//! Reads the byte slice line by line without copying the whole input. Knows
//! nothing of other formats, the file system or HTTP.

use std::collections::HashMap;
use std::collections::hash_map::Entry;

use super::grid::{self, Point, Seen};
use super::{BOM, IngestError, Ingested, Problems, Role, blamed_field};
use crate::dataset::DatasetMeta;

/// How cells are separated, detected from the header row.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Delimiter {
    Tab,
    Semicolon,
    Comma,
    Whitespace,
}

impl Delimiter {
    /// Tab first, then semicolon (files with a decimal comma use it), then
    /// comma, else runs of white space.
    fn detect(header: &str) -> Self {
        if header.contains('\t') {
            Self::Tab
        } else if header.contains(';') {
            Self::Semicolon
        } else if header.contains(',') {
            Self::Comma
        } else {
            Self::Whitespace
        }
    }

    /// The cells of a line (comment already removed), trimmed and unquoted.
    fn split(self, line: &str) -> Vec<&str> {
        let sep = match self {
            Self::Tab => '\t',
            Self::Semicolon => ';',
            Self::Comma => ',',
            Self::Whitespace => return line.split_whitespace().map(unquote).collect(),
        };
        line.split(sep).map(unquote).collect()
    }
}

/// A cell without surrounding white space and double quotes.
fn unquote(cell: &str) -> &str {
    let cell = cell.trim();
    cell.strip_prefix('"')
        .and_then(|c| c.strip_suffix('"'))
        .map_or(cell, str::trim)
}

/// The part of a line before any `#`.
fn strip_comment(line: &str) -> &str {
    line.split_once('#').map_or(line, |(content, _)| content)
}

/// The file's lines, numbered from 1, without their LF or CRLF ends.
fn lines(bytes: &[u8]) -> impl Iterator<Item = (usize, &[u8])> {
    bytes
        .split(|&b| b == b'\n')
        .enumerate()
        .map(|(i, line)| (i + 1, line.strip_suffix(b"\r").unwrap_or(line)))
}

/// A column of the long layout: its position and its name as written.
#[derive(Debug, Clone)]
struct Column {
    index: usize,
    name: String,
}

#[derive(Debug)]
struct LongLayout {
    x: Column,
    t: Column,
    c: Column,
    err: Option<Column>,
}

/// A column of the wide layout after the corner.
#[derive(Debug, Clone, Copy)]
enum WideColumn {
    Offset(i32),
    /// The header cell was refused (a problem is recorded); its cells are
    /// skipped.
    Refused,
    /// The header cell is empty, as a trailing delimiter leaves it: the
    /// column must stay empty.
    Unnamed,
}

#[derive(Debug)]
struct WideLayout {
    columns: Vec<WideColumn>,
}

#[derive(Debug)]
enum Layout {
    Long(LongLayout),
    Wide(WideLayout),
}

#[derive(Debug)]
struct Header {
    line: usize,
    delimiter: Delimiter,
    width: usize,
    layout: Layout,
}

/// Where the header search stands.
#[derive(Debug)]
enum HeaderState {
    Pending,
    /// The header was refused: the rows cannot be read.
    Refused,
    Read(Header),
}

/// Corner cells that mark the wide layout (compared in lower case).
const WIDE_CORNERS: [&str; 5] = ["", "t", "time", "t\\x", "t/x"];

/// Reads the header row, or reports why it cannot be one.
fn read_header(
    content: &str,
    line: usize,
    problems: &mut Problems,
    notes: &mut Vec<String>,
) -> Option<Header> {
    let delimiter = Delimiter::detect(content);
    let cells = delimiter.split(content);
    let width = cells.len();
    let (corner, rest) = cells.split_first()?;
    let corner_is_wide = WIDE_CORNERS.contains(&corner.to_lowercase().as_str());
    if corner_is_wide && rest.iter().any(|c| grid::offset_from_text(c).is_ok()) {
        let layout = Layout::Wide(read_wide_header(rest, line, problems));
        return Some(Header {
            line,
            delimiter,
            width,
            layout,
        });
    }
    if cells.iter().all(|c| grid::number_from_text(c).is_ok()) {
        problems.at(
            line,
            "this line looks like data, but the first line that is not a comment must be \
             a header naming the columns, e.g. `x,t,C,err`",
        );
        return None;
    }
    let layout = read_long_header(&cells, line, problems, notes)?;
    Some(Header {
        line,
        delimiter,
        width,
        layout: Layout::Long(layout),
    })
}

fn read_wide_header(cells: &[&str], line: usize, problems: &mut Problems) -> WideLayout {
    let mut offsets = Vec::with_capacity(cells.len());
    let mut first_column: HashMap<i32, usize> = HashMap::new();
    for (k, cell) in cells.iter().enumerate() {
        // File columns are 1-based and the corner is column 1.
        let column = k + 2;
        if cell.is_empty() {
            offsets.push(WideColumn::Unnamed);
            continue;
        }
        match grid::offset_from_text(cell) {
            Err(reason) => {
                problems.at(
                    line,
                    format!("header column {column}: {reason} (wide layout needs integer offsets)"),
                );
                offsets.push(WideColumn::Refused);
            }
            Ok(x) => {
                if let Some(first) = first_column.get(&x) {
                    problems.at(
                        line,
                        format!(
                            "offset {x} appears twice in the header (columns {first} and {column})"
                        ),
                    );
                    offsets.push(WideColumn::Refused);
                } else {
                    first_column.insert(x, column);
                    offsets.push(WideColumn::Offset(x));
                }
            }
        }
    }
    WideLayout { columns: offsets }
}

fn read_long_header(
    cells: &[&str],
    line: usize,
    problems: &mut Problems,
    notes: &mut Vec<String>,
) -> Option<LongLayout> {
    let mut slots: [Option<Column>; 4] = [None, None, None, None];
    let mut ignored = Vec::new();
    let mut refused = false;
    for (index, name) in cells.iter().enumerate() {
        let Some(role) = Role::of(name) else {
            let shown = if name.is_empty() {
                "(unnamed)".to_string()
            } else {
                format!("`{name}`")
            };
            ignored.push(format!("{shown} (column {})", index + 1));
            continue;
        };
        let slot = match role {
            Role::Offset => &mut slots[0],
            Role::Time => &mut slots[1],
            Role::Value => &mut slots[2],
            Role::Error => &mut slots[3],
        };
        if let Some(first) = slot {
            problems.at(
                line,
                format!(
                    "columns `{}` ({}) and `{name}` ({}) both give `{}`",
                    first.name,
                    first.index + 1,
                    index + 1,
                    role.name()
                ),
            );
            refused = true;
        } else {
            *slot = Some(Column {
                index,
                name: (*name).to_string(),
            });
        }
    }
    let [x, t, c, err] = slots;
    for (slot, role) in [(&x, Role::Offset), (&t, Role::Time), (&c, Role::Value)] {
        if slot.is_none() {
            problems.at(
                line,
                format!(
                    "the header has no `{}` column (accepted names: {}, any case)",
                    role.name(),
                    role.aliases()
                ),
            );
            refused = true;
        }
    }
    if !ignored.is_empty() {
        notes.push(format!(
            "ignored columns not understood: {}",
            ignored.join(", ")
        ));
    }
    match (x, t, c) {
        (Some(x), Some(t), Some(c)) if !refused => Some(LongLayout { x, t, c, err }),
        _ => None,
    }
}

/// Metadata read from `# key: value` comment lines before the header, with
/// the line each field came from (to place problems found later).
#[derive(Debug, Default)]
struct MetaReader {
    meta: DatasetMeta,
    lines: HashMap<&'static str, usize>,
}

impl MetaReader {
    /// Takes a comment (without its `#`); comments that are not `key: value`
    /// with a known key are ordinary comments.
    fn comment(&mut self, text: &str, line: usize, problems: &mut Problems) {
        let Some((key, value)) = text.split_once(':') else {
            return;
        };
        let key = key.trim().to_lowercase().replace([' ', '-'], "_");
        let value = value.trim();
        let field = match key.as_str() {
            "platform" => {
                self.meta.platform = value.to_string();
                "platform"
            }
            "time_unit" => {
                self.meta.time_unit = value.to_string();
                "time_unit"
            }
            "notes" => {
                // Several notes lines make one multi-line note.
                if !self.meta.notes.is_empty() {
                    self.meta.notes.push('\n');
                }
                self.meta.notes.push_str(value);
                "notes"
            }
            "alpha" => {
                self.alpha(value, line, problems);
                "alpha"
            }
            "nearest_neighbour" | "nearest_neighbor" => {
                if let Some(b) = flag(value, "nearest_neighbour", line, problems) {
                    self.meta.nearest_neighbour = b;
                }
                "nearest_neighbour"
            }
            "symmetrised" | "symmetrized" => {
                if let Some(b) = flag(value, "symmetrised", line, problems) {
                    self.meta.symmetrised = b;
                }
                "symmetrised"
            }
            "source_window" => {
                let parsed = value.split_once(':').and_then(|(a, b)| {
                    Some([a.trim().parse::<u32>().ok()?, b.trim().parse::<u32>().ok()?])
                });
                match parsed {
                    Some(w) => self.meta.source_window = Some(w),
                    None => problems.at(
                        line,
                        format!(
                            "metadata `source_window`: `{value}` is not two site numbers \
                             written A:B (first and last source, from 0)"
                        ),
                    ),
                }
                "source_window"
            }
            "synthetic" => {
                if let Some(b) = flag(value, "synthetic", line, problems) {
                    self.meta.synthetic = b;
                }
                "synthetic"
            }
            "chain_length" => {
                match value.parse::<u32>() {
                    Ok(n) if n > 0 => self.meta.chain_length = Some(n),
                    _ => problems.at(
                        line,
                        format!("metadata `chain_length`: `{value}` is not a whole number ≥ 1"),
                    ),
                }
                "chain_length"
            }
            "source_site" => {
                match value.parse::<u32>() {
                    Ok(j) => self.meta.source_site = Some(j),
                    Err(_) => problems.at(
                        line,
                        format!("metadata `source_site`: `{value}` is not a whole number ≥ 0"),
                    ),
                }
                "source_site"
            }
            _ => return,
        };
        self.lines.insert(field, line);
    }

    fn alpha(&mut self, value: &str, line: usize, problems: &mut Problems) {
        let lower = value.to_lowercase();
        if [
            "inf",
            "infinity",
            "∞",
            "nn",
            "nearest_neighbour",
            "nearest neighbour",
        ]
        .contains(&lower.as_str())
        {
            self.meta.alpha = None;
            self.meta.nearest_neighbour = true;
            return;
        }
        match value.parse::<f64>() {
            Ok(a) if a.is_finite() && a > 0.0 => self.meta.alpha = Some(a),
            _ => problems.at(
                line,
                format!(
                    "metadata `alpha`: `{value}` is not a positive finite number \
                     (write `inf` for nearest-neighbour couplings)"
                ),
            ),
        }
    }

    /// The metadata after the cross-field checks of [`DatasetMeta::validate`],
    /// whose complaint is placed on the line of the field it names.
    fn finish(self, problems: &mut Problems) -> DatasetMeta {
        if let Err(message) = self.meta.validate() {
            let line = blamed_field(&message).and_then(|f| self.lines.get(f).copied());
            let reason = format!("metadata {message}");
            match line {
                Some(line) => problems.at(line, reason),
                None => problems.general(reason),
            }
        }
        self.meta
    }
}

fn flag(value: &str, key: &str, line: usize, problems: &mut Problems) -> Option<bool> {
    match value.to_lowercase().as_str() {
        "true" | "yes" | "1" => Some(true),
        "false" | "no" | "0" => Some(false),
        _ => {
            problems.at(
                line,
                format!("metadata `{key}`: `{value}` is not true/false (or yes/no, 1/0)"),
            );
            None
        }
    }
}

/// Everything the rows produce.
#[derive(Debug)]
struct Rows {
    points: Vec<Point>,
    seen: Seen<usize>,
    /// Wide layout: the line of each time's row.
    time_rows: HashMap<u64, usize>,
    count: usize,
}

impl Rows {
    fn new() -> Self {
        Self {
            points: Vec::new(),
            seen: Seen::new(),
            time_rows: HashMap::new(),
            count: 0,
        }
    }

    fn long(&mut self, l: &LongLayout, cells: &[&str], line: usize, problems: &mut Problems) {
        let cell = |col: &Column| cells.get(col.index).copied().unwrap_or("");
        let mut report = |col: &Column, reason: String| {
            problems.at(line, format!("column `{}`: {reason}", col.name));
        };
        let x = grid::offset_from_text(cell(&l.x)).map_err(|r| report(&l.x, r));
        let t = grid::checked_from_text(cell(&l.t), grid::time_value).map_err(|r| report(&l.t, r));
        let c = grid::checked_from_text(cell(&l.c), grid::corr_value).map_err(|r| report(&l.c, r));
        let err = match &l.err {
            None => Ok(None),
            Some(col) => grid::checked_from_text(cell(col), grid::error_value)
                .map(Some)
                .map_err(|r| report(col, r)),
        };
        let (Ok(x), Ok(t), Ok(c), Ok(err)) = (x, t, c, err) else {
            return;
        };
        if let Some(first) = self.seen.insert(x, t, line) {
            problems.at(
                line,
                format!("duplicate point x = {x}, t = {t}: already given on line {first}"),
            );
            return;
        }
        self.points.push(Point { x, t, c, err });
    }

    fn wide(&mut self, w: &WideLayout, cells: &[&str], line: usize, problems: &mut Problems) {
        let Some((time_cell, rest)) = cells.split_first() else {
            return;
        };
        let t = grid::checked_from_text(time_cell, grid::time_value)
            .map_err(|r| problems.at(line, format!("column 1 (time): {r}")));
        let mut row = Vec::new();
        for (k, (cell, column)) in rest.iter().zip(&w.columns).enumerate() {
            if cell.is_empty() {
                continue;
            }
            let x = match *column {
                WideColumn::Offset(x) => x,
                WideColumn::Refused => continue,
                WideColumn::Unnamed => {
                    problems.at(
                        line,
                        format!(
                            "column {} holds `{cell}` but has no offset in the header",
                            k + 2
                        ),
                    );
                    continue;
                }
            };
            match grid::checked_from_text(cell, grid::corr_value) {
                Ok(c) => row.push((x, c)),
                Err(r) => problems.at(line, format!("column {} (x = {x}): {r}", k + 2)),
            }
        }
        let Ok(t) = t else {
            return;
        };
        match self.time_rows.entry(t.to_bits()) {
            Entry::Occupied(first) => {
                let first = *first.get();
                problems.at(line, format!("time {t} already has a row on line {first}"));
                return;
            }
            Entry::Vacant(slot) => {
                slot.insert(line);
            }
        }
        self.points
            .extend(row.into_iter().map(|(x, c)| Point { x, t, c, err: None }));
    }
}

/// Parses CSV text in either layout. See the module documentation.
pub(super) fn parse(bytes: &[u8]) -> Result<Ingested, IngestError> {
    let mut problems = Problems::default();
    if bytes.starts_with(b"\xFF\xFE") || bytes.starts_with(b"\xFE\xFF") {
        problems.general("the file is UTF-16 encoded; save it as UTF-8");
        return Err(problems.into_error());
    }
    let bytes = bytes.strip_prefix(BOM).unwrap_or(bytes);
    let mut notes = Vec::new();
    let mut meta = MetaReader::default();
    let mut header = HeaderState::Pending;
    let mut rows = Rows::new();
    let mut any_text = false;
    for (line, raw) in lines(bytes) {
        let text = match std::str::from_utf8(raw) {
            Ok(text) => text,
            Err(e) => {
                problems.at(
                    line,
                    format!(
                        "not valid UTF-8 text (bad byte at column {}); save the file as UTF-8",
                        e.valid_up_to() + 1
                    ),
                );
                continue;
            }
        };
        let trimmed = text.trim();
        if trimmed.is_empty() {
            continue;
        }
        any_text = true;
        match &header {
            HeaderState::Refused => break,
            HeaderState::Pending => {
                if let Some(comment) = trimmed.strip_prefix('#') {
                    meta.comment(comment, line, &mut problems);
                    continue;
                }
                header = match read_header(strip_comment(text), line, &mut problems, &mut notes) {
                    Some(h) => HeaderState::Read(h),
                    None => HeaderState::Refused,
                };
            }
            HeaderState::Read(h) => {
                let content = strip_comment(text);
                if content.trim().is_empty() {
                    continue;
                }
                rows.count += 1;
                let cells = h.delimiter.split(content);
                if cells.len() != h.width {
                    problems.at(
                        line,
                        format!(
                            "wrong number of fields: {} where the header (line {}) has {}",
                            cells.len(),
                            h.line,
                            h.width
                        ),
                    );
                    continue;
                }
                match &h.layout {
                    Layout::Long(l) => rows.long(l, &cells, line, &mut problems),
                    Layout::Wide(w) => rows.wide(w, &cells, line, &mut problems),
                }
            }
        }
    }
    let with_errors = match &header {
        HeaderState::Pending if !any_text && problems.is_empty() => {
            problems.general("the file is empty");
            false
        }
        HeaderState::Pending => {
            problems.general(
                "no header line found: expected column names such as `x,t,C,err` \
                 (or a wide header of offsets) before the data",
            );
            false
        }
        HeaderState::Refused => false,
        HeaderState::Read(h) => {
            if rows.count == 0 {
                problems.at(h.line, "no data rows after the header");
            }
            matches!(&h.layout, Layout::Long(LongLayout { err: Some(_), .. }))
        }
    };
    let meta = meta.finish(&mut problems);
    problems.check()?;
    let map = grid::assemble(&rows.points, with_errors, &mut notes).map_err(|reason| {
        let mut p = Problems::default();
        p.general(reason);
        p.into_error()
    })?;
    Ok(Ingested { map, meta, notes })
}

#[cfg(test)]
mod tests {
    //! Expected values are the ones written into each test input; line
    //! numbers count every line of the input from 1 (common practice for
    //! text-file diagnostics, no source).

    use super::*;
    use crate::ingest::Problem;
    use crate::ingest::testing::{cell, same};

    fn accept(text: &str) -> Ingested {
        match parse(text.as_bytes()) {
            Ok(ingested) => ingested,
            Err(e) => panic!("expected acceptance, got {:?}", e.problems),
        }
    }

    fn refuse(text: &[u8]) -> Vec<Problem> {
        match parse(text) {
            Ok(ingested) => panic!("expected refusal, got a map {:?}", ingested.map),
            Err(e) => e.problems,
        }
    }

    fn lines_of(problems: &[Problem]) -> Vec<Option<usize>> {
        problems.iter().map(|p| p.line).collect()
    }

    #[test]
    fn long_layout_with_aliases_metadata_and_an_ignored_column() {
        let text = "# platform: synthetic ion chain\n\
                    # alpha: 1.5\n\
                    # chain_length: 21\n\
                    # source_site: 10\n\
                    # time_unit: 1/J\n\
                    # synthetic: yes\n\
                    # notes: made by our lattice-walk model\n\
                    \n\
                    Time; Site; Czz; sigma; weight\n\
                    0;0;1;0.01;7\n\
                    0;1;0;0.01;7   # trailing comment\n\
                    0.5;-1;0.2;0.02;7\n\
                    0.5;0;0.6;0.02;7\n\
                    0.5;1;0.2;0.02;7\n";
        let ok = accept(text);
        assert_eq!(ok.map.offsets(), &[-1, 0, 1]);
        assert_eq!(ok.map.n_times(), 2);
        assert!(cell(&ok.map, 0, 1, 1.0, Some(0.01)));
        assert!(cell(&ok.map, 1, 0, 0.2, Some(0.02)));
        // (t = 0, x = −1) is not given: missing, not filled.
        assert_eq!(ok.map.get(0, 0), None);
        assert!(
            ok.notes
                .iter()
                .any(|n| n.starts_with("1 of 6 grid points missing"))
        );
        assert!(
            ok.notes.iter().any(|n| n.contains("`weight` (column 5)")),
            "{:?}",
            ok.notes
        );
        assert_eq!(ok.meta.platform, "synthetic ion chain");
        assert_eq!(ok.meta.alpha, Some(1.5));
        assert_eq!(ok.meta.chain_length, Some(21));
        assert_eq!(ok.meta.source_site, Some(10));
        assert_eq!(ok.meta.time_unit, "1/J");
        assert!(ok.meta.synthetic);
        assert_eq!(ok.meta.notes, "made by our lattice-walk model");
    }

    #[test]
    fn delimiters_bom_crlf_and_quotes_are_accepted() {
        let variants = [
            "x\tt\tC\n0\t0\t1\n1\t0\t0\n",
            "x t   C\n0 0 1\n1  0\t0\n",
            "\u{feff}x,t,C\r\n0,0,1\r\n1,0,0\r\n",
            "\"x\",\"t\",\"C\"\n\"0\",0,1\n1,0,\"0\"",
            "x, t, C   # header comment\n0, 0, 1\n1, 0, 0\n",
            "x,t,C\n3.0,0,1\n4,0,0\n",
        ];
        for text in variants {
            let ok = accept(text);
            assert_eq!(ok.map.n_sites(), 2, "{text:?}");
            assert_eq!(ok.map.n_missing(), 0, "{text:?}");
            assert!(ok.map.errors().is_none());
        }
    }

    #[test]
    fn nan_negative_error_and_duplicate_are_all_named() {
        let text = b"x,t,C,err\n\
                     0,0,1,0.1\n\
                     1,0,nan,0.1\n\
                     # a comment line counts\n\
                     -1,0,0.5,-0.2\n\
                     \n\
                     0,0,0.9,0.1\n";
        let problems = refuse(text);
        assert_eq!(lines_of(&problems), vec![Some(3), Some(5), Some(7)]);
        assert!(problems[0].reason.contains("column `C`"), "{problems:?}");
        assert!(problems[0].reason.contains("not a finite number"));
        assert!(problems[1].reason.contains("column `err`"));
        assert!(problems[1].reason.contains("not positive"));
        assert!(problems[2].reason.contains("duplicate point x = 0, t = 0"));
        assert!(problems[2].reason.contains("line 2"));
    }

    #[test]
    fn every_kind_of_bad_row_is_reported_on_its_line() {
        let text = b"x,t,C,err\n\
                     0,0,1,0.1\n\
                     0,abc,1,0.1\n\
                     0,0.5,1\n\
                     0,-1,0.5,0.1\n\
                     1,0,inf,0.1\n\
                     2,0,1e400,0.1\n\
                     3.5,0,0.1,0.1\n\
                     4,0,0.1,0\n\
                     5,0,0.1,0.1,9\n\
                     6,0,,0.1\n\
                     7,0,0.1,-inf\n";
        let problems = refuse(text);
        let expected: Vec<Option<usize>> = (3..=12).map(Some).collect();
        assert_eq!(lines_of(&problems), expected, "{problems:?}");
        assert!(problems[0].reason.contains("`abc` is not a number"));
        let comma = refuse(b"x;t;C\n0;0,5;1\n");
        assert!(
            comma[0].reason.contains("decimals with a point"),
            "{comma:?}"
        );
        assert!(problems[1].reason.contains("wrong number of fields: 3"));
        assert!(problems[2].reason.contains("negative"));
        assert!(problems[3].reason.contains("`inf` is not a finite number"));
        // 1e400 exceeds the binary64 maximum ≈ 1.798e308 (IEEE 754).
        assert!(
            problems[4]
                .reason
                .contains("`1e400` is not a finite number")
        );
        assert!(
            problems[5]
                .reason
                .contains("`3.5` is not an integer site offset")
        );
        assert!(problems[6].reason.contains("not positive"));
        assert!(problems[7].reason.contains("wrong number of fields: 5"));
        assert!(problems[8].reason.contains("column `C`: is empty"));
        assert!(problems[9].reason.contains("column `err`"));
    }

    #[test]
    fn one_row_with_several_bad_fields_gets_a_problem_for_each() {
        let problems = refuse(b"x,t,C\n0.5,-2,nan\n");
        assert_eq!(lines_of(&problems), vec![Some(2), Some(2), Some(2)]);
    }

    #[test]
    fn empty_inputs_are_refused() {
        assert_eq!(refuse(b"")[0].reason, "the file is empty");
        assert_eq!(refuse(b"\n  \r\n")[0].reason, "the file is empty");
        let header_only = refuse(b"# platform: test\n\nx,t,C\n# nothing else\n\n");
        assert_eq!(lines_of(&header_only), vec![Some(3)]);
        assert!(header_only[0].reason.contains("no data rows"));
        let comments_only = refuse(b"# just a comment\n");
        assert!(
            comments_only[0].reason.contains("no header"),
            "{comments_only:?}"
        );
    }

    #[test]
    fn header_problems_name_the_header_line() {
        let missing = refuse(b"# c\nx,C\n0,1\n");
        assert_eq!(lines_of(&missing), vec![Some(2)]);
        assert!(missing[0].reason.contains("no `t` column"));
        let twice = refuse(b"x,site,t,C\n0,0,0,1\n");
        assert_eq!(lines_of(&twice), vec![Some(1)]);
        assert!(twice[0].reason.contains("`x` (1) and `site` (2)"));
        let data_first = refuse(b"\n0,0,1\n1,0,0\n");
        assert_eq!(lines_of(&data_first), vec![Some(2)]);
        assert!(data_first[0].reason.contains("looks like data"));
    }

    #[test]
    fn non_utf8_bytes_name_their_line() {
        let problems = refuse(b"x,t,C\n0,0,1\n1,0,\xff\xfe\n2,0,0\n");
        assert_eq!(lines_of(&problems), vec![Some(3)]);
        // The bad byte is the 5th of the line `1,0,\xff\xfe`.
        assert!(
            problems[0]
                .reason
                .contains("UTF-8 text (bad byte at column 5)")
        );
        assert!(refuse(b"\xff\xfex\x00")[0].reason.contains("UTF-16"));
    }

    #[test]
    fn metadata_values_are_checked_on_their_lines() {
        let text = b"# alpha: -1\n\
                     # chain_length: many\n\
                     # synthetic: maybe\n\
                     # source_site: x\n\
                     # unknown_key: kept as a comment\n\
                     x,t,C\n0,0,1\n";
        let problems = refuse(text);
        assert_eq!(
            lines_of(&problems),
            vec![Some(1), Some(2), Some(3), Some(4)]
        );
        assert!(problems[0].reason.contains("metadata `alpha`"));
        let cross = refuse(b"# source_site: 30\n# chain_length: 20\nx,t,C\n0,0,1\n");
        // DatasetMeta::validate blames source_site, given on line 1.
        assert_eq!(lines_of(&cross), vec![Some(1)]);
        assert!(cross[0].reason.contains("source_site"));
        let window =
            accept("# chain_length: 20\n# source_window: 5:14\n# symmetrised: yes\nx,t,C\n0,0,1\n");
        assert_eq!(window.meta.source_window, Some([5, 14]));
        assert!(window.meta.symmetrised);
        let outside = refuse(b"# chain_length: 20\n# source_window: 5:20\nx,t,C\n0,0,1\n");
        assert_eq!(lines_of(&outside), vec![Some(2)]);
        assert!(
            outside[0].reason.contains("source_window"),
            "{}",
            outside[0].reason
        );
        let garbled = refuse(b"# source_window: 5-14\nx,t,C\n0,0,1\n");
        assert_eq!(lines_of(&garbled), vec![Some(1)]);
        assert!(garbled[0].reason.contains("A:B"), "{}", garbled[0].reason);
        let nn = accept("# alpha: inf\nx,t,C\n0,0,1\n");
        assert_eq!(nn.meta.alpha, None);
        assert!(nn.meta.nearest_neighbour);
        // After the header, `# key: value` is an ordinary comment.
        let late = accept("x,t,C\n# alpha: -1\n0,0,1\n");
        assert_eq!(late.meta.alpha, None);
    }

    #[test]
    fn wide_layout_with_missing_cells() {
        for corner in ["", "t", "time", "t\\x", "T/X"] {
            let text = format!("{corner},-1,0,1\n0,0,1,0\n# between\n0.5,0.2,,0.2\n");
            let ok = accept(&text);
            assert_eq!(ok.map.offsets(), &[-1, 0, 1], "{corner}");
            assert!(same(ok.map.times(), &[0.0, 0.5]));
            assert_eq!(ok.map.get(1, 1), None);
            assert!(cell(&ok.map, 1, 2, 0.2, None));
            assert!(
                ok.notes
                    .iter()
                    .any(|n| n.starts_with("1 of 6 grid points missing"))
            );
        }
        let spaced = accept("t -1 0 1\n0 0 1 0\n");
        assert_eq!(spaced.map.n_sites(), 3);
        // A trailing delimiter leaves an unnamed, empty column: harmless.
        let trailing = accept(",0,1,\n0,1,0,\n");
        assert_eq!(trailing.map.n_sites(), 2);
        let stray = refuse(b",0,1,\n0,1,0,\n1,0.5,0.5,0.1\n");
        assert_eq!(lines_of(&stray), vec![Some(3)]);
        assert!(
            stray[0]
                .reason
                .contains("column 4 holds `0.1` but has no offset")
        );
    }

    #[test]
    fn wide_layout_problems_name_lines_and_columns() {
        let text = b"t,0,1,x2,1\n\
                     0,1,0,5,0\n\
                     0.5,nan,0.1,5,0.1\n\
                     0,1,0,5,0\n\
                     1,0.5,0.5,5\n\
                     -1,0.5,0.5,5,0\n";
        let problems = refuse(text);
        assert_eq!(
            lines_of(&problems),
            vec![Some(1), Some(1), Some(3), Some(4), Some(5), Some(6)],
            "{problems:?}"
        );
        assert!(problems[0].reason.contains("header column 4"));
        assert!(problems[1].reason.contains("offset 1 appears twice"));
        assert!(problems[2].reason.contains("column 2 (x = 0)"));
        assert!(problems[3].reason.contains("already has a row on line 2"));
        assert!(problems[4].reason.contains("wrong number of fields"));
        assert!(problems[5].reason.contains("negative"));
    }

    #[test]
    fn near_equal_times_are_distinct() {
        let ok = accept("x,t,C\n0,0.1,1\n0,0.1000000000001,1\n");
        assert_eq!(ok.map.n_times(), 2);
        assert!(ok.notes.iter().any(|n| n.contains("rounding")));
    }

    #[test]
    fn problem_list_is_capped() {
        let mut text = String::from("x,t,C\n");
        for i in 0..250 {
            text.push_str(&format!("{i},0,nan\n"));
        }
        let problems = refuse(text.as_bytes());
        assert_eq!(problems.len(), crate::ingest::MAX_PROBLEMS);
        assert_eq!(problems[0].line, Some(2));
        // 99 listed problems on lines 2..=100, then a count of the other 151.
        assert_eq!(problems[98].line, Some(100));
        assert_eq!(problems[99].reason, "…and 151 more problems");
    }

    #[test]
    fn sparse_points_cannot_demand_a_huge_grid() {
        // 5000 points with distinct x and t would span 5000 × 5000 = 2.5e7
        // cells, above the 2^24 ≈ 1.68e7 limit.
        let mut text = String::from("x,t,C\n");
        for i in 0..5000 {
            text.push_str(&format!("{i},{i},1\n"));
        }
        let problems = refuse(text.as_bytes());
        assert!(
            problems[0].reason.contains("grid points allowed"),
            "{problems:?}"
        );
    }

    #[test]
    fn damaged_input_never_panics() {
        let good = b"# alpha: 1\nx,t,C,err\n0,0,1,0.1\n1,0.5,0.2,0.1\n";
        for end in 0..good.len() {
            let _ = parse(&good[..end]);
        }
        for at in 0..good.len() {
            for byte in [0x00, 0xFF, b',', b'#', b'\n', b'-', b'e', b'"', b'\t', b';'] {
                let mut bad = good.to_vec();
                bad[at] = byte;
                if let Err(e) = parse(&bad) {
                    assert!(!e.problems.is_empty() && e.problems.len() <= 100);
                }
            }
        }
    }
}

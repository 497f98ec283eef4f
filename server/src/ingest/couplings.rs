//! Measured coupling matrices: CSV text → [`Couplings`] with line-numbered
//! problems.
//!
//! Owns the accepted matrix layout and its checks. Knows no file system,
//! database or HTTP, and nothing of what the couplings are used for (the
//! power-law fit lives in `spreadscope_physics::fit::couplings_fit`).
//!
//! Layout: N rows of N numbers, row i holding J_i0 … J_i(N−1) in the
//! convention H = Σ_{i<j} J_ij (σ⁺_i σ⁻_j + h.c. + …) (single-particle
//! hopping K_ij = J_ij), or in another one named by [`CouplingConvention`]
//! (J(SˣSˣ + SʸSʸ) is halved, J(σˣσˣ + σʸσʸ) doubled, physics notes); the
//! notes always state the convention read. Cells are separated by `,`, tab, `;` or white space (the
//! first row decides); `#` starts a comment line; blank lines are skipped.
//! A first row without any number is a header and is skipped; a first row
//! whose first cell is empty (as `pandas.DataFrame.to_csv` writes it) is a
//! header too, and then every row starts with a label, which is skipped. The diagonal is ignored. The
//! matrix must be symmetric to a relative 1e-9 of its largest entry, unless
//! [`CouplingsImportOptions::symmetrise`] asks for (J + Jᵀ)/2, in which case
//! the largest asymmetry is reported in a note. At most
//! [`MAX_PROBLEMS`](super::MAX_PROBLEMS) problems are listed; a matrix with
//! any problem is rejected whole.

use std::io::BufRead;

use ndarray::Array2;
use spreadscope_physics::model::couplings::Couplings;

use super::grid;
use super::{IngestError, Problems};

/// The largest matrix accepted: 4096 sites, 16 M entries (128 MiB).
pub const MAX_COUPLING_SITES: usize = 4096;

/// Relative asymmetry tolerated without [`CouplingsImportOptions::symmetrise`]
/// (the tolerance of [`Couplings::from_matrix`]).
const SYMMETRY_REL: f64 = 1e-9;

/// The Hamiltonian a matrix file is written for; spreadscope keeps
/// J_ij of H = Σ_{i<j} J_ij (σ⁺_i σ⁻_j + h.c.) (physics notes). With
/// σ⁺σ⁻ + h.c. = (σˣσˣ + σʸσʸ)/2 and S = σ/2 (common practice, no source):
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, serde::Deserialize, clap::ValueEnum)]
#[serde(rename_all = "kebab-case")]
pub enum CouplingConvention {
    /// J_ij (σ⁺_i σ⁻_j + h.c.): taken as written.
    #[default]
    FlipFlop,
    /// J_ij (σˣ_i σˣ_j + σʸ_i σʸ_j): twice the flip-flop coupling.
    PauliXy,
    /// J_ij (Sˣ_i Sˣ_j + Sʸ_i Sʸ_j), S = σ/2: half the flip-flop coupling.
    SpinXy,
}

impl CouplingConvention {
    /// Factor from the file's J to spreadscope's flip-flop J.
    #[must_use]
    pub fn factor(self) -> f64 {
        match self {
            Self::FlipFlop => 1.0,
            Self::PauliXy => 2.0,
            Self::SpinXy => 0.5,
        }
    }

    /// The convention in words, as the notes state it.
    #[must_use]
    pub fn words(self) -> &'static str {
        match self {
            Self::FlipFlop => "H = Σ J_ij (σ⁺_i σ⁻_j + h.c.)",
            Self::PauliXy => "H = Σ J_ij (σˣ_i σˣ_j + σʸ_i σʸ_j)",
            Self::SpinXy => "H = Σ J_ij (Sˣ_i Sˣ_j + Sʸ_i Sʸ_j), S = σ/2",
        }
    }
}

/// How to read a matrix.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct CouplingsImportOptions {
    /// Accept an asymmetric matrix and use (J + Jᵀ)/2.
    pub symmetrise: bool,
    /// The Hamiltonian the file's numbers belong to.
    pub convention: CouplingConvention,
}

/// A successfully read coupling matrix.
#[derive(Debug, Clone)]
pub struct CouplingsIngested {
    pub couplings: Couplings,
    /// Largest |J_ij − J_ji| relative to the largest |J|.
    pub asymmetry: f64,
    pub notes: Vec<String>,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Delimiter {
    Char(char),
    Space,
}

impl Delimiter {
    fn detect(line: &str) -> Self {
        [',', '\t', ';']
            .into_iter()
            .find(|d| line.contains(*d))
            .map_or(Self::Space, Self::Char)
    }

    fn split(self, line: &str) -> Vec<&str> {
        match self {
            Self::Char(c) => line
                .split(c)
                .map(|cell| {
                    let cell = cell.trim();
                    cell.strip_prefix('"')
                        .and_then(|c| c.strip_suffix('"'))
                        .unwrap_or(cell)
                })
                .collect(),
            Self::Space => line.split_whitespace().collect(),
        }
    }
}

/// Reads a coupling matrix from CSV text. See the module documentation.
///
/// # Errors
/// Every problem found, each with its line (and column where it applies).
pub fn parse_couplings<R: BufRead>(
    mut reader: R,
    options: &CouplingsImportOptions,
) -> Result<CouplingsIngested, IngestError> {
    let mut problems = Problems::default();
    let mut notes = Vec::new();
    let mut delimiter = None;
    let mut labelled = false;
    let mut width: Option<(usize, usize)> = None;
    // (line, values) of every data row.
    let mut rows: Vec<(usize, Vec<f64>)> = Vec::new();
    let mut buf = Vec::new();
    let mut line = 0usize;
    loop {
        buf.clear();
        match reader.read_until(b'\n', &mut buf) {
            Ok(0) => break,
            Ok(_) => {}
            Err(e) => {
                problems.general(format!(
                    "the input could not be read after line {line}: {e}"
                ));
                break;
            }
        }
        line += 1;
        let bytes = if line == 1 {
            buf.strip_prefix(b"\xEF\xBB\xBF").unwrap_or(&buf)
        } else {
            &buf
        };
        let Ok(text) = std::str::from_utf8(bytes) else {
            problems.at(line, "the line is not valid UTF-8 text");
            continue;
        };
        let text = text.trim();
        if text.is_empty() || text.starts_with('#') {
            continue;
        }
        let delim = *delimiter.get_or_insert_with(|| Delimiter::detect(text));
        let mut cells = delim.split(text);
        if rows.is_empty() && width.is_none() {
            // A header has no number at all, or an empty corner cell before
            // column labels (pandas); a row of numbers with a typo is data.
            let corner = cells.first().is_some_and(|c| c.is_empty());
            let any_number = cells.iter().any(|c| grid::number_from_text(c).is_ok());
            if corner || !any_number {
                labelled = corner;
                notes.push(format!("line {line} was read as a header and skipped"));
                width = Some((0, line));
                continue;
            }
        }
        if labelled && !cells.is_empty() {
            cells.remove(0);
        }
        match width {
            Some((w, _)) if w > 0 && cells.len() != w => {
                let first = width.map_or(0, |(_, l)| l);
                problems.at(
                    line,
                    format!(
                        "the row has {} entries but the first row (line {first}) has {w}",
                        cells.len()
                    ),
                );
                continue;
            }
            Some((w, _)) if w > 0 => {}
            _ => width = Some((cells.len(), line)),
        }
        if cells.len() > MAX_COUPLING_SITES {
            problems.at(
                line,
                format!(
                    "the row has {} entries; at most {MAX_COUPLING_SITES} sites are supported",
                    cells.len()
                ),
            );
            break;
        }
        let mut values = Vec::with_capacity(cells.len());
        for (col, cell) in cells.iter().enumerate() {
            match grid::checked_from_text(cell, grid::corr_value) {
                Ok(v) => values.push(v),
                Err(reason) => {
                    problems.at(line, format!("column {}: {reason}", col + 1));
                    values.push(0.0);
                }
            }
        }
        rows.push((line, values));
        if rows.len() > MAX_COUPLING_SITES {
            problems.at(
                line,
                format!("more than {MAX_COUPLING_SITES} rows; the matrix is too large"),
            );
            break;
        }
    }
    let n = rows.len();
    let cols = width.map_or(0, |(w, _)| w);
    if n == 0 {
        problems.general("the file holds no matrix rows");
    } else if !problems.is_empty() {
        // The shape is judged only once every row was readable.
    } else if n != cols {
        problems.general(format!(
            "the matrix has {n} rows of {cols} entries; a coupling matrix must be square"
        ));
    } else if n < 2 {
        problems.general("a coupling matrix needs at least 2 sites");
    }
    problems.check()?;
    let mut problems = Problems::default();
    let mut matrix = Array2::from_shape_fn((n, n), |(i, j)| rows[i].1[j]);
    let scale = matrix.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    let mut asymmetry = 0.0f64;
    for i in 0..n {
        for j in (i + 1)..n {
            let (a, b) = (matrix[(i, j)], matrix[(j, i)]);
            let diff = (a - b).abs();
            if scale > 0.0 {
                asymmetry = asymmetry.max(diff / scale);
            }
            if !options.symmetrise && diff > SYMMETRY_REL * scale {
                problems.at(
                    rows[j].0,
                    format!(
                        "J[{j}][{i}] = {b} differs from J[{i}][{j}] = {a} on line {}; the \
                         matrix must be symmetric (or ask for symmetrisation)",
                        rows[i].0
                    ),
                );
            }
            let mean = 0.5 * (a + b);
            matrix[(i, j)] = mean;
            matrix[(j, i)] = mean;
        }
    }
    problems.check()?;
    let diagonal = (0..n).filter(|&i| matrix[(i, i)].abs() > 0.0).count();
    if diagonal > 0 {
        notes.push(format!(
            "{diagonal} nonzero diagonal entries were ignored (no self-coupling)"
        ));
    }
    if options.symmetrise && asymmetry > SYMMETRY_REL {
        notes.push(format!(
            "the matrix was symmetrised as (J + Jᵀ)/2; the largest asymmetry was {:.3} % \
             of the largest coupling",
            100.0 * asymmetry
        ));
    }
    let factor = options.convention.factor();
    if options.convention == CouplingConvention::FlipFlop {
        notes.push(format!(
            "read in the convention {} (spreadscope's)",
            options.convention.words()
        ));
    } else {
        matrix.mapv_inplace(|v| v * factor);
        notes.push(format!(
            "read in the convention {} and multiplied by {factor} to spreadscope's {}",
            options.convention.words(),
            CouplingConvention::FlipFlop.words()
        ));
    }
    let couplings = Couplings::from_matrix(matrix).map_err(|e| IngestError {
        problems: vec![super::Problem {
            line: None,
            reason: e.to_string(),
        }],
    })?;
    notes.push(format!("a {n} × {n} coupling matrix"));
    Ok(CouplingsIngested {
        couplings,
        asymmetry,
        notes,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use spreadscope_physics::tolerance::close;

    fn accept(text: &str) -> CouplingsIngested {
        parse_couplings(text.as_bytes(), &CouplingsImportOptions::default()).expect("valid")
    }

    fn refuse(text: &str) -> Vec<super::super::Problem> {
        match parse_couplings(text.as_bytes(), &CouplingsImportOptions::default()) {
            Ok(c) => panic!("expected refusal, got {:?}", c.couplings),
            Err(e) => e.problems,
        }
    }

    #[test]
    fn the_convention_scales_the_matrix_and_is_stated() {
        // σ⁺σ⁻ + h.c. = (σˣσˣ + σʸσʸ)/2 and S = σ/2 (common practice, no
        // source): a file written for J(σˣσˣ + σʸσʸ) doubles, one for
        // J(SˣSˣ + SʸSʸ) halves.
        let text = "0,1,0.5\n1,0,1\n0.5,1,0\n";
        for (convention, factor) in [
            (CouplingConvention::FlipFlop, 1.0),
            (CouplingConvention::PauliXy, 2.0),
            (CouplingConvention::SpinXy, 0.5),
        ] {
            let read = parse_couplings(
                text.as_bytes(),
                &CouplingsImportOptions {
                    convention,
                    ..CouplingsImportOptions::default()
                },
            )
            .expect("reads");
            let m = read.couplings.matrix();
            assert!((m[(0, 1)] - factor).abs() < 1e-15, "{convention:?}");
            assert!((m[(0, 2)] - 0.5 * factor).abs() < 1e-15, "{convention:?}");
            assert!(
                read.notes.iter().any(|n| n.contains(convention.words())),
                "{:?}",
                read.notes
            );
        }
    }

    #[test]
    fn numpy_savetxt_power_law_is_read() {
        // numpy.savetxt(f, J, delimiter=",") of J_ij = 1/|i−j| (α = 1,
        // J = 1) on 3 sites: numpy's default format "%.18e".
        let text = "# SYNTHETIC power law, alpha = 1\n\
            0.000000000000000000e+00,1.000000000000000000e+00,5.000000000000000000e-01\n\
            1.000000000000000000e+00,0.000000000000000000e+00,1.000000000000000000e+00\n\
            5.000000000000000000e-01,1.000000000000000000e+00,0.000000000000000000e+00\n";
        let c = accept(text);
        assert_eq!(c.couplings.sites(), 3);
        assert!(close(c.couplings.get(0, 2), 0.5, 0.0, 0.0));
        assert!(close(c.couplings.get(2, 1), 1.0, 0.0, 0.0));
        assert!(c.asymmetry.abs() < f64::MIN_POSITIVE);
    }

    #[test]
    fn pandas_header_and_labels_and_whitespace_layouts_are_read() {
        // pandas.DataFrame(J).to_csv() writes an empty corner cell, the
        // column labels, and a row label in front of every row.
        let c = accept(",0,1\n0,0.0,0.25\n1,0.25,0.0\n");
        assert!(close(c.couplings.get(0, 1), 0.25, 0.0, 0.0));
        assert!(c.notes.iter().any(|n| n.contains("header")));
        let c = accept("\u{feff}0 2.5 1\n2.5 0 3\n1 3 9\n");
        assert!(close(c.couplings.get(1, 2), 3.0, 0.0, 0.0));
        // The diagonal 9 is ignored and said so.
        assert!(close(c.couplings.get(2, 2), 0.0, 0.0, 0.0));
        assert!(c.notes.iter().any(|n| n.contains("diagonal")));
    }

    #[test]
    fn every_bad_row_is_named_by_line() {
        let problems = refuse("0,1,x\n1,0\n# note\n1e400,1,0\n");
        let lines: Vec<Option<usize>> = problems.iter().map(|p| p.line).collect();
        assert_eq!(lines, vec![Some(1), Some(2), Some(4)], "{problems:?}");
        assert!(
            problems[0]
                .reason
                .starts_with("column 3: `x` is not a number")
        );
        assert!(
            problems[1]
                .reason
                .contains("2 entries but the first row (line 1) has 3")
        );
        assert!(problems[2].reason.contains("column 1"));

        let problems = refuse("0,1,2\n1,0,3\n");
        assert!(
            problems[0].reason.contains("must be square"),
            "{problems:?}"
        );
        assert!(refuse("")[0].reason.contains("no matrix rows"));
        assert!(refuse("5\n")[0].reason.contains("at least 2 sites"));
    }

    #[test]
    fn asymmetry_names_both_lines_or_is_averaged_on_request() {
        let text = "# measured\n0,1.0,0.5\n1.0,0,1.0\n0.4,1.0,0\n";
        let problems = refuse(text);
        assert_eq!(problems.len(), 1);
        assert_eq!(problems[0].line, Some(4));
        assert!(
            problems[0]
                .reason
                .contains("J[2][0] = 0.4 differs from J[0][2] = 0.5 on line 2"),
            "{}",
            problems[0].reason
        );
        let c = parse_couplings(
            text.as_bytes(),
            &CouplingsImportOptions {
                symmetrise: true,
                ..CouplingsImportOptions::default()
            },
        )
        .expect("symmetrised");
        assert!(close(c.couplings.get(0, 2), 0.45, 1e-15, 0.0));
        // |0.5 − 0.4| / 1.0 = 10 %.
        assert!(close(c.asymmetry, 0.1, 1e-12, 0.0));
        assert!(
            c.notes.iter().any(|n| n.contains("10.000 %")),
            "{:?}",
            c.notes
        );
    }
}

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

//! Inputs are written in memory with ndarray-npy's writers (an
//! implementation independent of the reader above) or assembled byte by
//! byte from the format description in NumPy NEP 1; expected values are
//! the ones written.

use super::*;
use crate::ingest::testing::{cell, same};
use crate::ingest::{Format, Problem, parse, sniff};
use ndarray::{Array1, Array2, ShapeBuilder, array};
use ndarray_npy::{NpzWriter, WriteNpyExt};
use std::io::Cursor;

type Writer = NpzWriter<Cursor<Vec<u8>>>;

fn npz(build: impl FnOnce(&mut Writer)) -> Vec<u8> {
    let mut writer = NpzWriter::new(Cursor::new(Vec::new()));
    build(&mut writer);
    writer.finish().expect("in-memory archive").into_inner()
}

fn npy(array: &impl WriteNpyExt) -> Vec<u8> {
    let mut buf = Vec::new();
    array.write_npy(&mut buf).expect("in-memory npy");
    buf
}

fn reasons(problems: &[Problem]) -> Vec<&str> {
    problems.iter().map(|p| p.reason.as_str()).collect()
}

fn refuse_npz(bytes: &[u8]) -> Vec<Problem> {
    match parse_npz(bytes) {
        Ok(ingested) => panic!("expected refusal, got {:?}", ingested.map),
        Err(e) => e.problems,
    }
}

#[test]
fn a_malformed_size_member_is_refused_identically_by_the_map_and_the_shot_reader() {
    use std::io::Write;
    // `t.npy` of shape (3,) and dtype `<f8` needs 3 × 8 = 24 data bytes
    // after its header (NumPy NEP 1); one copy loses its last element's
    // bytes, one carries 8 bytes too many.
    let whole = npy(&Array1::from(vec![0.0f64, 1.0, 2.0]));
    let short = whole
        .get(..whole.len() - 8)
        .expect("header and data")
        .to_vec();
    let long = [whole.as_slice(), &[0u8; 8]].concat();
    for (member, expected) in [
        (
            short,
            "array `t`: the data are truncated: 16 bytes where shape [3] of `<f8` needs 24",
        ),
        (
            long,
            "array `t`: 8 bytes follow the data that shape [3] of `<f8` describes",
        ),
    ] {
        let mut zip = zip::ZipWriter::new(Cursor::new(Vec::new()));
        let stored = zip::write::SimpleFileOptions::default()
            .compression_method(zip::CompressionMethod::Stored);
        zip.start_file("t.npy", stored).expect("member");
        zip.write_all(&member).expect("write");
        let bytes = zip.finish().expect("archive").into_inner();
        let map = refuse_npz(&bytes);
        let shots = match crate::ingest::shots::parse_npz(&bytes) {
            Ok(ok) => panic!("expected refusal, got {:?}", ok.records),
            Err(e) => e.problems,
        };
        let map_reasons = reasons(&map);
        let shot_reasons = reasons(&shots);
        assert_eq!(map_reasons.first(), Some(&expected), "{map_reasons:?}");
        assert_eq!(shot_reasons.first(), Some(&expected), "{shot_reasons:?}");
    }
}

fn axes(x: Vec<i32>, t: Vec<f64>) -> IngestOptions {
    IngestOptions {
        x: Some(x),
        t: Some(t),
    }
}

#[test]
fn npz_with_errors_and_mask() {
    let bytes = npz(|w| {
        w.add_array("C", &array![[0.0, 1.0, f64::NAN], [0.25, 0.5, 0.25]])
            .unwrap();
        w.add_array("t", &array![0.0, 0.5]).unwrap();
        w.add_array("x", &array![-1i64, 0, 1]).unwrap();
        w.add_array("err", &array![[0.1, 0.1, f64::NAN], [0.3, 0.4, 0.2]])
            .unwrap();
        w.add_array("mask", &array![[true, true, false], [true, true, true]])
            .unwrap();
        w.add_array("notes", &array![1u8]).unwrap();
    });
    assert_eq!(sniff(&bytes), Some(Format::Npz));
    let ok = parse(&bytes, Format::Npz, &IngestOptions::default()).expect("valid");
    assert_eq!(ok.map.offsets(), &[-1, 0, 1]);
    assert!(same(ok.map.times(), &[0.0, 0.5]));
    assert!(cell(&ok.map, 0, 1, 1.0, Some(0.1)));
    assert!(cell(&ok.map, 1, 2, 0.25, Some(0.2)));
    assert_eq!(ok.map.get(0, 2), None);
    assert!(
        ok.notes
            .iter()
            .any(|n| n.starts_with("1 of 6 grid points missing"))
    );
    assert!(
        ok.notes.iter().any(|n| n.contains("`notes`")),
        "{:?}",
        ok.notes
    );
}

#[test]
fn npz_accepts_float_offsets_f32_values_and_integer_times() {
    // 0.5 and 0.25 are exact in binary32, so the widening is exact.
    let bytes = npz(|w| {
        w.add_array("corr", &array![[0.5f32, 0.25]]).unwrap();
        w.add_array("time", &array![2i32]).unwrap();
        w.add_array("site", &array![3.0f64, 1.0]).unwrap();
    });
    let ok = parse_npz(&bytes).expect("valid");
    assert_eq!(ok.map.offsets(), &[1, 3]);
    assert!(cell(&ok.map, 0, 0, 0.25, None));
    assert!(cell(&ok.map, 0, 1, 0.5, None));
}

#[test]
fn npz_value_problems_name_array_and_index() {
    let bytes = npz(|w| {
        w.add_array("C", &array![[1.0, 0.0, 0.0], [0.5, 0.25, f64::NAN]])
            .unwrap();
        w.add_array("t", &array![0.0, -0.5]).unwrap();
        w.add_array("x", &array![0.0, 0.5, 2.0]).unwrap();
        w.add_array("err", &array![[0.1, 0.0, 0.1], [0.1, 0.1, 0.1]])
            .unwrap();
    });
    let problems = refuse_npz(&bytes);
    assert!(problems.iter().all(|p| p.line.is_none()));
    assert_eq!(
        reasons(&problems),
        vec![
            "`x[1]`: 0.5 is not an integer site offset",
            "`t[1]`: -0.5 is negative (times must be ≥ 0)",
            "`err[0, 1]`: 0 is not positive (one-sigma errors must be > 0)",
            "`C[1, 2]`: NaN is not a finite number (mark missing points with a boolean \
                 `mask` array, true = present)",
        ]
    );
}

#[test]
fn npz_structure_problems() {
    let missing = refuse_npz(&npz(|w| {
        w.add_array("C", &array![[1.0]]).unwrap();
        w.add_array("x", &array![0i64]).unwrap();
    }));
    assert_eq!(
        reasons(&missing),
        vec!["the archive has no array `t` (times)"]
    );

    let transposed = refuse_npz(&npz(|w| {
        w.add_array("C", &Array2::<f64>::zeros((3, 2))).unwrap();
        w.add_array("t", &array![0.0, 1.0]).unwrap();
        w.add_array("x", &array![0i64, 1, 2]).unwrap();
    }));
    assert_eq!(
        reasons(&transposed),
        vec![
            "array `C` has shape (3, 2) but the axes make 2 times × 3 sites (it looks \
                 transposed: store it as times × sites)"
        ]
    );

    let wrong_types = refuse_npz(&npz(|w| {
        w.add_array("C", &array![[1i64, 0]]).unwrap();
        w.add_array("t", &array![0.0]).unwrap();
        w.add_array("x", &array![[0i64, 1]]).unwrap();
        w.add_array("mask", &array![[1u8, 1]]).unwrap();
    }));
    assert_eq!(
        reasons(&wrong_types),
        vec![
            "array `x` (site offsets) must be 1-D, found shape (1, 2)",
            "array `C` has dtype `<i8`; expected float64 or float32",
            "array `mask` has dtype `|u1`; the mask must be boolean (true = present)",
        ]
    );

    let twice = refuse_npz(&npz(|w| {
        w.add_array("C", &array![[1.0]]).unwrap();
        w.add_array("Czz", &array![[1.0]]).unwrap();
        w.add_array("t", &array![0.0]).unwrap();
        w.add_array("x", &array![0i64]).unwrap();
    }));
    assert_eq!(
        reasons(&twice),
        vec!["arrays `C` and `Czz` play the same part; keep one"]
    );

    let not_zip = refuse_npz(b"PK\x03\x04 not really a zip");
    assert!(
        not_zip[0].reason.starts_with("not a readable NPZ"),
        "{not_zip:?}"
    );
}

#[test]
fn npy_uses_axes_from_the_request_in_either_memory_order() {
    let c_order = array![[1.0, 0.0], [0.5, 0.5], [0.25, 0.75]];
    let f_order =
        Array2::from_shape_vec((3, 2).f(), vec![1.0, 0.5, 0.25, 0.0, 0.5, 0.75]).expect("shape");
    assert!(!f_order.is_standard_layout());
    for bytes in [npy(&c_order), npy(&f_order)] {
        assert_eq!(sniff(&bytes), Some(Format::Npy));
        let ok = parse(&bytes, Format::Npy, &axes(vec![0, 1], vec![0.0, 1.0, 2.0])).expect("valid");
        assert!(cell(&ok.map, 2, 1, 0.75, None));
        assert!(cell(&ok.map, 1, 0, 0.5, None));
        assert!(ok.notes.is_empty());
    }
}

#[test]
fn npy_problems() {
    let bytes = npy(&array![[1.0, f64::NAN]]);
    let none = parse_npy(&bytes, &IngestOptions::default()).expect_err("no axes");
    assert_eq!(none.problems.len(), 2);
    assert!(
        none.problems[0]
            .reason
            .starts_with("request parameter `x` is needed")
    );
    assert!(
        none.problems[1]
            .reason
            .starts_with("request parameter `t` is needed")
    );

    let nan = parse_npy(&bytes, &axes(vec![0, 1], vec![0.0])).expect_err("NaN");
    assert!(
        nan.problems[0]
            .reason
            .starts_with("`array[0, 1]`: NaN is not a finite number")
    );

    let swapped = parse_npy(&bytes, &axes(vec![0], vec![0.0, 1.0])).expect_err("shape");
    assert!(
        swapped.problems[0].reason.contains("looks transposed"),
        "{swapped:?}"
    );

    let flat =
        parse_npy(&npy(&Array1::<f64>::zeros(3)), &axes(vec![0], vec![0.0])).expect_err("1-D");
    assert!(flat.problems[0].reason.contains("must be 2-D"));

    let bad_axes =
        parse_npy(&npy(&array![[1.0, 0.0]]), &axes(vec![1, 1], vec![-1.0])).expect_err("axes");
    assert_eq!(
        reasons(&bad_axes.problems),
        vec![
            "`request parameter x[1]` repeats the value of `request parameter x[0]`",
            "`request parameter t[0]`: -1 is negative (times must be ≥ 0)",
        ]
    );
}

/// An NPY image assembled by hand after NumPy NEP 1: magic, version,
/// little-endian header length (u16 for 1.0, u32 for 2.0), the header
/// dictionary padded with spaces and ended by a newline, then the data.
fn handmade(version: u8, header: &str, data: &[u8]) -> Vec<u8> {
    let mut dict = header.to_string();
    let prefix = if version == 1 { 10 } else { 12 };
    while (prefix + dict.len() + 1) % 64 != 0 {
        dict.push(' ');
    }
    dict.push('\n');
    let mut out = b"\x93NUMPY".to_vec();
    out.extend([version, 0]);
    if version == 1 {
        out.extend(u16::try_from(dict.len()).expect("short").to_le_bytes());
    } else {
        out.extend(u32::try_from(dict.len()).expect("short").to_le_bytes());
    }
    out.extend(dict.as_bytes());
    out.extend(data);
    out
}

#[test]
fn handmade_big_endian_and_version_2_files_are_read() {
    let mut data = Vec::new();
    data.extend(1.0f64.to_be_bytes());
    data.extend(0.5f64.to_be_bytes());
    let v1 = handmade(
        1,
        "{'descr': '>f8', 'fortran_order': False, 'shape': (1, 2), }",
        &data,
    );
    let v2 = handmade(
        2,
        "{\"descr\": \">f8\", \"fortran_order\": False, \"shape\": (1L, 2L)}",
        &data,
    );
    for bytes in [v1, v2] {
        let ok = parse_npy(&bytes, &axes(vec![0, 1], vec![0.0])).expect("valid");
        assert!(cell(&ok.map, 0, 0, 1.0, None));
        assert!(cell(&ok.map, 0, 1, 0.5, None));
    }
}

#[test]
fn forged_headers_are_refused_before_allocating() {
    let header = |descr: &str, shape: &str| {
        format!("{{'descr': '{descr}', 'fortran_order': False, 'shape': {shape}, }}")
    };
    let one = 1.0f64.to_le_bytes();
    let cases: [(Vec<u8>, &str); 8] = [
        (
            handmade(1, &header("<f8", "(1099511627776, 1099511627776)"), &one),
            "elements allowed",
        ),
        (
            handmade(1, &header("<f8", "(4096, 4096)"), &one),
            "the data are truncated",
        ),
        (
            handmade(1, &header("<f8", "(1, 1)"), &[one, one].concat()),
            "8 bytes follow the data",
        ),
        (
            handmade(1, &header("<c16", "(1, 1)"), &one),
            "dtype `<c16` is not supported",
        ),
        (
            handmade(1, &header("|O", "(1, 1)"), &one),
            "dtype `|O` is not supported",
        ),
        (
            handmade(
                1,
                "{'descr': [('a', '<f8')], 'fortran_order': False, 'shape': (1,)}",
                &one,
            ),
            "structured dtypes",
        ),
        (
            b"\x93NUMPY\x02\x00\xff\xff\xff\xff{".to_vec(),
            "header is truncated",
        ),
        (
            b"\x93NUMPY\x09\x00".to_vec(),
            "version 9.0 is not supported",
        ),
    ];
    for (bytes, expected) in cases {
        let err = parse_npy(&bytes, &axes(vec![0], vec![0.0])).expect_err(expected);
        assert!(
            err.problems[0].reason.contains(expected),
            "{expected}: {err:?}"
        );
    }
}

#[test]
fn damaged_input_never_panics() {
    let good_npy = npy(&array![[1.0, 0.5]]);
    let good_npz = npz(|w| {
        w.add_array("C", &array![[1.0, 0.5]]).unwrap();
        w.add_array("t", &array![0.0]).unwrap();
        w.add_array("x", &array![0i64, 1]).unwrap();
    });
    let options = axes(vec![0, 1], vec![0.0]);
    for (good, format) in [(&good_npy, Format::Npy), (&good_npz, Format::Npz)] {
        for end in 0..good.len() {
            assert!(parse(&good[..end], format, &options).is_err());
        }
        for at in 0..good.len() {
            for byte in [0x00, 0xFF, 0x7F, b'(', b')', b'\'', b'9', b','] {
                let mut bad = good.clone();
                bad[at] = byte;
                if let Err(e) = parse(&bad, format, &options) {
                    assert!(!e.problems.is_empty() && e.problems.len() <= 100);
                }
            }
        }
    }
}

//! Property tests: random bytes and randomly mutated valid files, fed to
//! every parser, never panic; a refusal always names at least one problem;
//! an acceptance always yields a map whose values are finite. Case counts are
//! bounded so the suite stays quick in CI.

use proptest::prelude::*;
use spreadscope::ingest::shots::{self, ShotFormat};
use spreadscope::ingest::{self, Format, IngestOptions};

use crate::support::{SMALL_CSV, repo_path};

fn check_map_parser(bytes: &[u8], format: Format) {
    let options = IngestOptions {
        x: Some(vec![-1, 0, 1]),
        t: Some(vec![0.0, 1.0]),
    };
    match ingest::parse(bytes, format, &options) {
        Ok(parsed) => {
            assert!(parsed.map.sum_rule().iter().all(|p| p.sum.is_finite()));
        }
        Err(e) => assert!(!e.problems.is_empty(), "a refusal names a problem"),
    }
}

fn check_shot_parser(bytes: &[u8], format: ShotFormat) {
    if let Err(e) = shots::parse(bytes, format) {
        assert!(!e.problems.is_empty(), "a refusal names a problem");
    }
}

/// One mutation: flip, insert or delete a byte at a position.
fn mutate(mut bytes: Vec<u8>, edits: &[(u8, usize, u8)]) -> Vec<u8> {
    for &(kind, pos, value) in edits {
        if bytes.is_empty() {
            bytes.push(value);
            continue;
        }
        let at = pos % bytes.len();
        match kind % 3 {
            0 => bytes[at] = value,
            1 => bytes.insert(at, value),
            _ => {
                bytes.remove(at);
            }
        }
    }
    bytes
}

fn valid_inputs() -> Vec<(Vec<u8>, Format)> {
    let json = br#"{"x":[-1,0,1],"t":[0,1],"C":[[0,1,0],[0.25,0.5,0.25]],"err":[[0.1,0.1,0.1],[0.1,0.1,0.1]]}"#;
    let wide = b"t,-1,0,1\n0,0,1,0\n1,0.25,0.5,0.25\n";
    let npz = {
        let mut writer = ndarray_npy::NpzWriter::new(std::io::Cursor::new(Vec::new()));
        writer
            .add_array("C", &ndarray::array![[0.0, 1.0, 0.0], [0.25, 0.5, 0.25]])
            .expect("C");
        writer
            .add_array("t", &ndarray::array![0.0, 1.0])
            .expect("t");
        writer
            .add_array("x", &ndarray::array![-1i64, 0, 1])
            .expect("x");
        let bytes = writer.finish().expect("npz").into_inner();
        assert!(
            ingest::parse(&bytes, Format::Npz, &IngestOptions::default()).is_ok(),
            "the seed file is valid"
        );
        bytes
    };
    vec![
        (SMALL_CSV.as_bytes().to_vec(), Format::Csv),
        (wide.to_vec(), Format::Csv),
        (json.to_vec(), Format::Json),
        (npz, Format::Npz),
    ]
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 200, ..ProptestConfig::default() })]

    #[test]
    fn random_bytes_never_panic_any_parser(bytes in proptest::collection::vec(any::<u8>(), 0..600)) {
        for format in [Format::Csv, Format::Json, Format::Npy, Format::Npz, Format::Hdf5] {
            check_map_parser(&bytes, format);
        }
        for format in [ShotFormat::Csv, ShotFormat::Npz, ShotFormat::Hdf5] {
            check_shot_parser(&bytes, format);
        }
    }

    #[test]
    fn mutated_valid_maps_never_panic(
        which in 0usize..4,
        edits in proptest::collection::vec((any::<u8>(), any::<usize>(), any::<u8>()), 1..8),
    ) {
        let (bytes, format) = valid_inputs().swap_remove(which);
        check_map_parser(&mutate(bytes, &edits), format);
    }

    #[test]
    fn mutated_valid_shot_files_never_panic(
        which in 0usize..3,
        edits in proptest::collection::vec((any::<u8>(), any::<usize>(), any::<u8>()), 1..8),
    ) {
        let (file, format) = [
            ("tests/reference/shots/shots.csv", ShotFormat::Csv),
            ("tests/reference/shots/shots.npz", ShotFormat::Npz),
            ("tests/reference/shots/shots_chunked.h5", ShotFormat::Hdf5),
        ][which];
        let bytes = std::fs::read(repo_path(file)).expect("fixture");
        check_shot_parser(&mutate(bytes, &edits), format);
    }
}

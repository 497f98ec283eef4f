//! The command line as scripts use it: exit codes and outputs.

use spreadscope::ingest::{self, Format, IngestOptions};

use crate::support::binary;

#[test]
fn unknown_options_exit_2() {
    let out = binary()
        .args(["serve", "--no-such-flag"])
        .output()
        .expect("runs");
    assert_eq!(out.status.code(), Some(2));
}

#[test]
fn simulate_refuses_bad_options_with_exit_2_naming_the_option() {
    let dir = tempfile::tempdir().expect("temp dir");
    let out_file = dir.path().join("x.csv");
    for (args, option) in [
        (vec!["--sites", "11", "--times", "1,1"], "--times"),
        (vec!["--sites", "11", "--times", "0:1:3:cubic"], "--times"),
        (
            vec!["--sites", "11", "--times", "1,2", "--source", "20"],
            "--source",
        ),
        (vec!["--sites", "1", "--times", "1,2"], "--sites"),
        (
            vec!["--sites", "11", "--times", "1,2", "--alpha", "-1"],
            "--alpha",
        ),
    ] {
        let out = binary()
            .args(["simulate", "lattice-walk"])
            .args(&args)
            .arg("--out")
            .arg(&out_file)
            .output()
            .expect("runs");
        assert_eq!(out.status.code(), Some(2), "{args:?}");
        let stderr = String::from_utf8_lossy(&out.stderr);
        assert!(stderr.contains(option), "{args:?}: {stderr}");
        assert_eq!(stderr.trim().lines().count(), 1, "one line: {stderr}");
    }
    assert!(!out_file.exists(), "nothing written on bad input");
}

fn simulate(args: &[&str]) -> spreadscope_physics::CorrelationMap {
    let dir = tempfile::tempdir().expect("temp dir");
    let path = dir.path().join("sim.csv");
    let out = binary()
        .arg("simulate")
        .args(args)
        .arg("--out")
        .arg(&path)
        .output()
        .expect("runs");
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let bytes = std::fs::read(&path).expect("written");
    let parsed = ingest::parse(&bytes, Format::Csv, &IngestOptions::default())
        .expect("our own output parses");
    assert!(parsed.meta.synthetic, "marked synthetic");
    parsed.map
}

#[test]
fn simulated_files_round_trip_bit_for_bit() {
    let map = simulate(&[
        "lattice-walk",
        "--sites",
        "21",
        "--alpha",
        "1.2",
        "--times",
        "0.1:10:7:log",
    ]);
    let walk = spreadscope_physics::model::lattice_walk::LatticeWalk::power_law(21, 1.0, 1.2)
        .expect("walk");
    let direct = walk.to_correlation_map(10, map.times()).expect("map");
    assert_eq!(
        map.times(),
        direct.times(),
        "times survive printing exactly"
    );
    assert_eq!(
        map.values(),
        direct.values(),
        "values survive printing exactly"
    );
}

#[test]
fn two_site_spin_chain_from_the_command_line_is_cos_squared() {
    // C_11(t) = cos²(Jt), C_21(t) = sin²(Jt) for two sites (physics notes,
    // derivable by hand: the flip-flop term rotates |↑↓⟩ into |↓↑⟩).
    let map = simulate(&[
        "spin-chain",
        "--sites",
        "2",
        "--source",
        "0",
        "--coupling",
        "0.7",
        "--times",
        "0:3:7",
        "--method",
        "exact",
    ]);
    for (ti, &t) in map.times().iter().enumerate() {
        let c = (0.7 * t).cos().powi(2);
        assert!((map.values()[(ti, 0)] - c).abs() < 1e-12, "t = {t}");
        assert!((map.values()[(ti, 1)] - (1.0 - c)).abs() < 1e-12, "t = {t}");
    }
}

#[test]
fn free_fermion_and_exact_paths_agree_for_a_nearest_neighbour_chain() {
    // Jordan–Wigner is exact for nearest-neighbour flip-flop chains
    // (physics notes): the free-fermion shortcut and exact diagonalisation must
    // give the same map.
    let common = ["--sites", "8", "--times", "0.5:4:4"];
    let free = simulate(&[&["spin-chain"][..], &common, &["--method", "auto"]].concat());
    let exact = simulate(&[&["spin-chain"][..], &common, &["--method", "exact"]].concat());
    let diff = (free.values() - exact.values())
        .mapv(f64::abs)
        .fold(0.0f64, |m, &v| m.max(v));
    assert!(diff < 1e-10, "max difference {diff}");
}

#[test]
fn analyze_refuses_every_bad_corpus_file_with_exit_2_naming_the_file() {
    let expect = std::fs::read_to_string(crate::support::repo_path("tests/data/bad/expect.tsv"))
        .expect("expect.tsv");
    let mut failures = Vec::new();
    for row in expect
        .lines()
        .filter(|l| !l.starts_with('#') && !l.trim().is_empty())
    {
        let cols: Vec<&str> = row.split('\t').collect();
        let (file, line) = (cols[0], cols[1]);
        let path = crate::support::repo_path(&format!("tests/data/bad/{file}"));
        let out = binary()
            .args(["analyze", "--bootstrap", "0"])
            .arg(&path)
            .output()
            .expect("runs");
        let stderr = String::from_utf8_lossy(&out.stderr);
        if out.status.code() != Some(2) {
            failures.push(format!("{file}: exit {:?}", out.status.code()));
        } else if !stderr.contains(file) {
            failures.push(format!("{file}: message does not name the file: {stderr}"));
        } else if stderr.trim().lines().count() != 1 {
            failures.push(format!("{file}: not one line: {stderr}"));
        } else if line != "-" && !stderr.contains(&format!("line {line}")) {
            failures.push(format!("{file}: line {line} not named: {stderr}"));
        }
    }
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}

#[test]
fn analyze_json_has_the_documented_keys() {
    let dir = tempfile::tempdir().expect("temp dir");
    let path = dir.path().join("walk.csv");
    let made = binary()
        .args([
            "simulate",
            "lattice-walk",
            "--sites",
            "61",
            "--alpha",
            "1.25",
            "--times",
            "0.5:8:16:log",
            "--out",
        ])
        .arg(&path)
        .output()
        .expect("runs");
    assert!(made.status.success());
    let out = binary()
        .args(["analyze", "--json", "--bootstrap", "0", "--sites", "61"])
        .arg(&path)
        .output()
        .expect("runs");
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).expect("json");
    for key in [
        "/dataset/sites",
        "/dataset/times",
        "/dataset/sum_rule/min",
        "/dataset/sum_rule/max",
        "/autocorrelation/z",
        "/autocorrelation/z_err",
        "/autocorrelation/t_window",
        "/collapse/z",
        "/collapse/z_err",
        "/collapse/quality",
        "/profile/model",
        "/profile/mu",
        "/profile/mu_err",
        "/profile/D",
        "/profile/D_err",
        "/profile/chi2_dof",
        "/warnings",
        "/lattice_walk/alpha",
        "/lattice_walk/alpha_err",
        "/lattice_walk/gamma0",
        "/lattice_walk/gamma0_err",
    ] {
        assert!(v.pointer(key).is_some(), "missing {key}");
    }
    // Noise-free lattice-walk data of the same model: the walk fit finds
    // the α it was made with (simulate's own parameters, no noise).
    let alpha = v
        .pointer("/lattice_walk/alpha")
        .and_then(serde_json::Value::as_f64)
        .expect("alpha");
    assert!((alpha - 1.25).abs() < 1e-6, "alpha = {alpha}");
    let human = binary()
        .args(["analyze", "--bootstrap", "0"])
        .arg(&path)
        .output()
        .expect("runs");
    assert!(human.status.success());
    assert!(String::from_utf8_lossy(&human.stdout).contains("spreadscope"));
}

fn correlate(
    file: &str,
    extra: &[&str],
) -> (
    std::process::Output,
    Option<spreadscope_physics::CorrelationMap>,
) {
    let dir = tempfile::tempdir().expect("temp dir");
    let out_path = dir.path().join("c.csv");
    let out = binary()
        .arg("correlate")
        .arg(crate::support::repo_path(file))
        .args(extra)
        .arg("--out")
        .arg(&out_path)
        .output()
        .expect("runs");
    let map = std::fs::read(&out_path).ok().map(|b| {
        ingest::parse(&b, Format::Csv, &IngestOptions::default())
            .expect("our output parses")
            .map
    });
    (out, map)
}

#[test]
fn correlate_gives_the_same_map_from_every_shot_format() {
    let args = ["--bootstrap", "20", "--seed", "5", "--source", "0"];
    let (out, csv) = correlate("tests/reference/shots/shots.csv", &args);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let csv = csv.expect("written");
    assert!(csv.errors().is_some(), "bootstrap errors written");
    for other in [
        "tests/reference/shots/shots.npz",
        "tests/reference/shots/shots_chunked.h5",
    ] {
        let (out, map) = correlate(other, &args);
        assert!(
            out.status.success(),
            "{other}: {}",
            String::from_utf8_lossy(&out.stderr)
        );
        assert_eq!(
            map.expect("written").values(),
            csv.values(),
            "{other} differs from the CSV"
        );
    }
}

#[test]
fn correlate_refuses_bad_shots_and_bad_options_with_exit_2() {
    let dir = tempfile::tempdir().expect("temp dir");
    let bad = dir.path().join("bad.csv");
    std::fs::write(
        &bad,
        "state_id,t,init_bits,meas_bits\na,0,0101,0101\na,1,0101,01x1\n",
    )
    .expect("writes");
    let out = binary()
        .arg("correlate")
        .arg(&bad)
        .arg("--out")
        .arg(dir.path().join("o.csv"))
        .output()
        .expect("runs");
    assert_eq!(out.status.code(), Some(2));
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(
        stderr.contains("bad.csv") && stderr.contains("line 3"),
        "{stderr}"
    );
    let (out, _) = correlate("tests/reference/shots/shots.csv", &["--readout", "0.7,0.1"]);
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("readout"));
}

#[test]
fn simulate_stable_samples_the_closed_forms() {
    // μ = 1: Cauchy s/(π(s² + x²)) with s = D t; μ = 2: Gaussian of
    // variance 2Dt (physics notes conventions, closed forms).
    let cauchy = simulate(&[
        "stable",
        "--mu",
        "1",
        "--diffusion",
        "0.5",
        "--x-max",
        "5",
        "--times",
        "2,4",
    ]);
    for (ti, &t) in cauchy.times().iter().enumerate() {
        let s = 0.5 * t;
        for (xi, &x) in cauchy.offsets().iter().enumerate() {
            let want = s / (std::f64::consts::PI * (s * s + f64::from(x).powi(2)));
            assert!(
                (cauchy.values()[(ti, xi)] - want).abs() < 1e-14 * want.max(1e-300),
                "x = {x}"
            );
        }
    }
    let gauss = simulate(&[
        "stable",
        "--mu",
        "2",
        "--diffusion",
        "1.5",
        "--x-max",
        "4",
        "--times",
        "1",
    ]);
    let want = (-9.0f64 / (4.0 * 1.5)).exp() / (2.0 * (std::f64::consts::PI * 1.5).sqrt());
    let col = gauss.column_of(3).expect("x = 3");
    assert!((gauss.values()[(0, col)] - want).abs() < 1e-14 * want);
}

#[test]
fn simulate_uses_a_measured_coupling_matrix() {
    // A matrix equal to the nearest-neighbour power law must reproduce the
    // power-law run exactly (same couplings, same engine path).
    let dir = tempfile::tempdir().expect("temp dir");
    let matrix = dir.path().join("J.csv");
    let n = 6;
    let rows: Vec<String> = (0..n)
        .map(|i: i32| {
            (0..n)
                .map(|j: i32| if (i - j).abs() == 1 { "1" } else { "0" })
                .collect::<Vec<_>>()
                .join(",")
        })
        .collect();
    std::fs::write(&matrix, rows.join("\n") + "\n").expect("writes");
    let from_matrix = simulate(&[
        "spin-chain",
        "--coupling-matrix",
        matrix.to_str().expect("utf-8"),
        "--times",
        "0.5,1",
        "--method",
        "exact",
    ]);
    let from_law = simulate(&[
        "spin-chain",
        "--sites",
        "6",
        "--times",
        "0.5,1",
        "--method",
        "exact",
    ]);
    let diff = (from_matrix.values() - from_law.values())
        .mapv(f64::abs)
        .fold(0.0f64, |m, &v| m.max(v));
    assert!(diff < 1e-12, "{diff}");
}

#[test]
fn analyze_reads_a_correlation_map_from_hdf5() {
    // tests/reference/shots/map.h5 is written by h5py (make_fixtures.py);
    // the same file through the API is covered by the format sniffing.
    let out = binary()
        .args(["analyze", "--json", "--bootstrap", "0"])
        .arg(crate::support::repo_path("tests/reference/shots/map.h5"))
        .output()
        .expect("runs");
    let stderr = String::from_utf8_lossy(&out.stderr);
    // A small fixture may be too short for every estimator, but it must be
    // read: either a report, or a refusal that is about the analysis and
    // not about the file.
    if out.status.success() {
        let v: serde_json::Value = serde_json::from_slice(&out.stdout).expect("json");
        assert!(v.pointer("/dataset/sites").is_some());
    } else {
        assert!(!stderr.contains("format"), "{stderr}");
    }
    let bytes =
        std::fs::read(crate::support::repo_path("tests/reference/shots/map.h5")).expect("fixture");
    assert_eq!(ingest::sniff(&bytes), Some(Format::Hdf5));
    let parsed =
        ingest::parse(&bytes, Format::Hdf5, &IngestOptions::default()).expect("map.h5 parses");
    assert!(parsed.map.n_sites() > 0 && parsed.map.n_times() > 0);
}

#[test]
fn session_new_list_and_rename_work_on_a_data_directory() {
    let dir = tempfile::tempdir().expect("temp dir");
    let data = dir.path().to_str().expect("utf-8 path");
    let run = |args: &[&str]| {
        let out = binary()
            .arg("session")
            .args(args)
            .args(["--data", data, "--json"])
            .output()
            .expect("runs");
        (
            out.status.code(),
            String::from_utf8_lossy(&out.stdout).into_owned(),
            String::from_utf8_lossy(&out.stderr).into_owned(),
        )
    };
    let (code, out, err) = run(&["new", "Chain A"]);
    assert_eq!(code, Some(0), "{err}");
    let made: serde_json::Value = serde_json::from_str(&out).expect("json");
    assert_eq!(made[0]["name"], "Chain A");
    let edit_url = made[0]["edit_url"].as_str().expect("edit link").to_string();
    run(&["new", "Chain B"]);

    let (code, out, _) = run(&["list"]);
    assert_eq!(code, Some(0));
    let list: serde_json::Value = serde_json::from_str(&out).expect("json");
    let names: Vec<&str> = list
        .as_array()
        .expect("list")
        .iter()
        .filter_map(|s| s["name"].as_str())
        .collect();
    assert_eq!(
        names,
        ["Chain A", "Chain B"],
        "no demo session added by these commands"
    );

    let (code, out, err) = run(&["rename", &edit_url, "Chain A, long run"]);
    assert_eq!(code, Some(0), "{err}");
    assert!(out.contains("Chain A, long run"));
    let number = list[1]["number"].to_string();
    let (code, _, _) = run(&["rename", &number, "Chain B2"]);
    assert_eq!(code, Some(0));
    let (_, out, _) = run(&["list"]);
    assert!(out.contains("Chain B2") && out.contains("Chain A, long run"));

    let (code, _, err) = run(&["rename", "999", "x"]);
    assert_eq!(code, Some(2));
    assert!(err.contains("999"), "{err}");
    let long = "y".repeat(201);
    let (code, _, err) = run(&["rename", &number, &long]);
    assert_eq!(code, Some(2));
    assert!(err.contains("200 characters"), "{err}");
}

#[test]
fn a_bulk_map_from_correlate_carries_its_sources_into_analyze() {
    let dir = tempfile::tempdir().expect("temp dir");
    let out_path = dir.path().join("bulk.csv");
    let out = binary()
        .arg("correlate")
        .arg(crate::support::repo_path("tests/reference/shots/shots.csv"))
        .args([
            "--bulk",
            "0:1",
            "--symmetrise",
            "--bootstrap",
            "10",
            "--out",
        ])
        .arg(&out_path)
        .output()
        .expect("runs");
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let bytes = std::fs::read(&out_path).expect("written");
    let read = ingest::parse(&bytes, Format::Csv, &IngestOptions::default()).expect("parses");
    assert_eq!(read.meta.chain_length, Some(6));
    assert_eq!(read.meta.source_window, Some([0, 1]));
    assert_eq!(read.meta.source_site, None);
    assert!(read.meta.symmetrised);
    let analysed = binary()
        .args(["analyze", "--json", "--bootstrap", "0"])
        .arg(&out_path)
        .output()
        .expect("runs");
    assert!(
        analysed.status.success(),
        "{}",
        String::from_utf8_lossy(&analysed.stderr)
    );
    let report: serde_json::Value = serde_json::from_slice(&analysed.stdout).expect("json");
    assert_eq!(report["windows"]["chain_sites"], 6, "{report}");
    assert_eq!(
        report["windows"]["source_average"],
        serde_json::json!({"first": 0, "last": 1, "symmetrised": true})
    );
}

#[test]
fn simulate_runs_long_chains_semiclassically_with_errors() {
    // 60 sites is beyond every exact method; `auto` and `dtwa` both take the
    // semiclassical path, the map covers the chain, carries errors, and
    // keeps the exact sum rule Σ_x C = 1 of the antithetic estimator
    // (physics notes, semiclassical dynamics).
    for method in ["auto", "dtwa"] {
        let map = simulate(&[
            "spin-chain",
            "--sites",
            "60",
            "--alpha",
            "1.1",
            "--times",
            "0,0.5,1",
            "--method",
            method,
            "--trajectories",
            "64",
        ]);
        assert_eq!(map.n_sites(), 60);
        assert!(map.errors().is_some(), "{method}: errors written");
        for row in map.values().rows() {
            assert!(
                (row.sum() - 1.0).abs() < 1e-9,
                "{method}: Σ_x C = {}",
                row.sum()
            );
        }
    }
}

/// Runs `base` whole and in three shards, merges the shards in `order` and
/// checks the merged file equals the whole run's byte for byte; returns the
/// whole run's file and the shard files.
fn shard_round_trip(
    base: &[&str],
    dir: &std::path::Path,
    order: [usize; 3],
) -> (std::path::PathBuf, Vec<std::path::PathBuf>) {
    let whole = dir.join("whole.csv");
    let out = binary()
        .args(base)
        .arg("--out")
        .arg(&whole)
        .output()
        .expect("runs");
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let mut parts = Vec::new();
    for k in 1..=3 {
        let part = dir.join(format!("part-{k}.json"));
        let out = binary()
            .args(base)
            .args(["--shard", &format!("{k}/3"), "--out"])
            .arg(&part)
            .output()
            .expect("runs");
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        parts.push(part);
    }
    let merged = dir.join("merged.csv");
    let out = binary()
        .arg("merge")
        .args(order.map(|i| &parts[i]))
        .arg("--out")
        .arg(&merged)
        .output()
        .expect("runs");
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert_eq!(
        std::fs::read(&merged).expect("merged"),
        std::fs::read(&whole).expect("whole"),
        "the merged file differs from the single run's"
    );
    (whole, parts)
}

#[test]
fn shards_of_a_semiclassical_run_merge_into_exactly_the_file_of_one_run() {
    let dir = tempfile::tempdir().expect("temp dir");
    let base = [
        "simulate",
        "spin-chain",
        "--sites",
        "30",
        "--alpha",
        "1.2",
        "--delta",
        "0.5",
        "--times",
        "0,0.5,1,2",
        "--method",
        "dtwa",
        "--trajectories",
        "300",
        "--seed",
        "9",
    ];
    // Any order of the parts.
    let (whole, parts) = shard_round_trip(&base, dir.path(), [2, 0, 1]);
    // A missing part, a part given twice and a part of another run are refused.
    let refuse = |files: &[&std::path::PathBuf], says: &str| {
        let out = binary()
            .arg("merge")
            .args(files)
            .arg("--out")
            .arg(dir.path().join("never.csv"))
            .output()
            .expect("runs");
        assert_eq!(out.status.code(), Some(2));
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(err.contains(says), "{err}");
    };
    refuse(&[&parts[0], &parts[1]], "part 3/3 is missing");
    refuse(&[&parts[0], &parts[0], &parts[1]], "is also given as");
    let other = dir.path().join("other.json");
    let other_run: Vec<&str> = base
        .iter()
        .map(|&a| if a == "9" { "10" } else { a })
        .collect();
    let out = binary()
        .args(&other_run)
        .args(["--shard", "3/3", "--out"])
        .arg(&other)
        .output()
        .expect("runs");
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    refuse(&[&parts[0], &parts[1], &other], "part of another run");
    refuse(&[&whole], "not a shard file");
    // Only semiclassical runs split.
    let out = binary()
        .args([
            "simulate",
            "spin-chain",
            "--sites",
            "8",
            "--times",
            "0.5",
            "--method",
            "exact",
        ])
        .args(["--shard", "1/2", "--out"])
        .arg(dir.path().join("x.json"))
        .output()
        .expect("runs");
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("--shard 1/2"));
}

#[test]
fn shards_of_a_typicality_run_merge_into_exactly_the_file_of_one_run() {
    // The random vectors of every sector, split three ways by their place in
    // the canonical order, reduce to the single run's bits (the records are
    // summed in canonical order whatever the parts).
    let dir = tempfile::tempdir().expect("temp dir");
    let base = [
        "simulate",
        "spin-chain",
        "--sites",
        "10",
        "--alpha",
        "1.1",
        "--delta",
        "0.3",
        "--times",
        "0,0.5,1.5",
        "--method",
        "typicality",
        "--samples",
        "2",
        "--seed",
        "4",
    ];
    shard_round_trip(&base, dir.path(), [1, 2, 0]);
}

//! `search` and `merge` on the real binary: a search whose answer is known from `check`, sharded
//! studies joined byte for byte, `--resume`, the written best setup, the Latin-hypercube design,
//! the Pareto column, and bad input. Sessions are short (20–60 s) and populations small, so each
//! test takes a second or two.
//!
//! Values from the shipped files are read with the `ron` crate into this file's own structs;
//! statistics are recomputed here from the written CSV files.

use std::collections::BTreeMap;
use std::fs;
use std::path::Path;

use serde::Deserialize;
use serde_json::Value;

use crate::common::{column, read_csv, repo, run_code, run_env, run_ok, WorkDir};

#[derive(Debug, Deserialize)]
struct SetupFile {
    drive: DriveFile,
}

#[derive(Debug, Deserialize)]
struct DriveFile {
    stages: Vec<StageFile>,
}

#[derive(Debug, Deserialize)]
struct StageFile {
    ratio: f64,
}

#[derive(Debug, Deserialize)]
struct ProfileFile {
    segments: Vec<SegmentFile>,
}

#[derive(Debug, Deserialize)]
struct SegmentFile {
    cadence_rpm: f64,
}

fn parse_ron<T: for<'de> Deserialize<'de>>(text: &str, what: &str) -> T {
    ron::Options::default()
        .with_default_extension(ron::extensions::Extensions::IMPLICIT_SOME)
        .from_str(text)
        .unwrap_or_else(|e| panic!("parse {what} with the test's own structs: {e}"))
}

fn shipped<T: for<'de> Deserialize<'de>>(rel: &str) -> T {
    let path = repo().join(rel);
    let text = fs::read_to_string(&path).unwrap_or_else(|e| panic!("read {rel}: {e}"));
    parse_ron(&text, rel)
}

fn read_json(path: &Path) -> Value {
    let text = fs::read_to_string(path).unwrap_or_else(|e| panic!("read {}: {e}", path.display()));
    serde_json::from_str(&text).unwrap_or_else(|e| panic!("json {}: {e}", path.display()))
}

fn text_col(header: &[String], rows: &[Vec<String>], name: &str) -> Vec<String> {
    let k = header
        .iter()
        .position(|h| h == name)
        .unwrap_or_else(|| panic!("no column {name}"));
    rows.iter().map(|r| r[k].clone()).collect()
}

/// A smooth population: no jitter, every operator as strong as the profile's, each with the
/// cadence offset montecarlo draws for it.
const SMOOTH: [&str; 6] = [
    "--set",
    "profile.jitter.enabled=false",
    "--set",
    "profile.operator.spread.critical_power_w=0",
    "--set",
    "profile.operator.spread.w_prime_j=0",
];

/// Every file of a folder, by name.
/// The study's files by name. The folder's marker (`manifest.json`) is left out: it records the
/// command that wrote the folder (search, merge, or a resumed search), not the study.
fn files(dir: &Path) -> BTreeMap<String, Vec<u8>> {
    fs::read_dir(dir)
        .unwrap_or_else(|e| panic!("list {}: {e}", dir.display()))
        .map(|e| {
            let e = e.expect("entry");
            (
                e.file_name().to_string_lossy().into_owned(),
                fs::read(e.path()).expect("read"),
            )
        })
        .filter(|(name, _)| name != "manifest.json")
        .collect()
}

// ---------------------------------------------------------------------------------------------
// The answer known from `check`
// ---------------------------------------------------------------------------------------------

#[test]
fn search_finds_the_least_ratio_that_keeps_the_tenth_percentile_operator_in_regulation() {
    let wd = WorkDir::new();
    let n = 20usize;
    // "Fails regulation" as an operator in regulation less than half the cranking time: an
    // operator above the onset cadence loses only the start-up seconds, one below it nearly all.
    let mut common: Vec<&str> = SMOOTH.to_vec();
    common.extend(["--set", "alerts.min_in_regulation_fraction=0.5"]);
    // The static figures hold at one temperature: the winding (copper resistance, magnets'
    // back-EMF coefficient) is held at ambient by a thermal mass no minute of cranking warms,
    // so the known answer is exact rather than a minute's warming away from it.
    common.extend(["--set", "generator.winding_heat_capacity_j_per_k=10000"]);

    // The generator speed from which the charger holds its current (static, from check): the
    // crank onset times the total ratio. A PMDC generator's EMF depends on its speed only, so
    // the crank onset at any first-stage ratio r1 is that speed / (r1·r2).
    let mut check = vec!["check", "--json"];
    check.extend(&common);
    let c: Value = serde_json::from_str(&run_ok(&wd, &check)).expect("check json");
    let onset_rpm = c["converter"]["regulation_cadence_at_start_rpm"]
        .as_f64()
        .expect("onset");
    let generator_onset_rpm = onset_rpm * c["drive"]["total_ratio"].as_f64().expect("ratio");

    // The operators: montecarlo's runs 0..n of the same seed are the search's operators; with
    // no jitter each holds the profile's cadence plus its own drawn offset.
    let mut mc = vec![
        "montecarlo",
        "--runs",
        "20",
        "--duration",
        "60",
        "--no-plot",
        "--out",
        "mc",
    ];
    mc.extend(&common);
    run_ok(&wd, &mc);
    let (h, rows) = read_csv(&wd.path("mc/runs.csv"));
    let mut offsets = column(&h, &rows, "cadence_offset_rpm");
    assert_eq!(offsets.len(), n);
    offsets.sort_by(f64::total_cmp);
    let profile: ProfileFile = shipped("profiles/cranking/steady.ron");
    let setup: SetupFile = shipped("profiles/setups/demo.ron");
    let r2 = setup.drive.stages[1].ratio;
    // p_fail_regulation <= 0.1 of 20 lets 2 operators fail: the third slowest must regulate.
    let allowed_failures = (0.1 * n as f64).floor() as usize;
    let slowest_kept = profile.segments[0].cadence_rpm + offsets[allowed_failures];
    let expected_r1 = generator_onset_rpm / (r2 * slowest_kept);
    assert!(
        (3.0..7.0).contains(&expected_r1),
        "the answer {expected_r1} must lie inside the searched range"
    );

    let step = 0.5;
    let mut args = vec![
        "search",
        "--vary",
        "drive.stages.0.ratio=2..8:13",
        "--operators",
        "20",
        "--duration",
        "60",
        "--require",
        "p_fail_regulation<=0.1",
        "--minimise",
        "drive.stages.0.ratio",
        "--out",
        "s",
    ];
    args.extend(&common);
    let stdout = run_ok(&wd, &args);
    assert!(stdout.contains("p_fail_regulation<=0.1 binds"), "{stdout}");
    let (h, rows) = read_csv(&wd.path("s/points.csv"));
    let ratio = column(&h, &rows, "drive.stages.0.ratio");
    let origin = text_col(&h, &rows, "origin");
    let feasible = text_col(&h, &rows, "feasible");
    let p_fail = column(&h, &rows, "p_fail_regulation");
    let least = |from: &str| {
        (0..rows.len())
            .filter(|&i| origin[i] == from && feasible[i] == "true")
            .map(|i| ratio[i])
            .fold(f64::INFINITY, f64::min)
    };
    let grid_best = least("grid");
    assert!(
        grid_best >= expected_r1 - 1e-9 && grid_best < expected_r1 + step,
        "grid: least feasible ratio {grid_best}, expected the first grid value at or above {expected_r1}"
    );
    let refined = least("refine");
    assert!(
        (refined - expected_r1).abs() <= 0.01 * expected_r1,
        "refined {refined} against {expected_r1} (1 %)"
    );
    for i in 0..rows.len() {
        assert_eq!(feasible[i] == "true", p_fail[i] <= 0.1, "row {i}");
    }
    let s = read_json(&wd.path("s/search.json"));
    assert_eq!(s["binding"]["constraint"], "p_fail_regulation<=0.1");
    let best: f64 = s["best"]["values"][0]["value"]
        .as_str()
        .expect("value")
        .parse()
        .expect("number");
    assert_eq!(best, refined.min(grid_best));
}

// ---------------------------------------------------------------------------------------------
// Shards, merge, resume
// ---------------------------------------------------------------------------------------------

/// A small 2-axis study with a categorical axis, constraints, refinement and a Pareto view.
fn small_study(out: &str) -> Vec<String> {
    [
        "search",
        "--vary",
        "drive.stages.0.ratio=3..7:5",
        "--vary",
        "battery.chemistry=nmc,lfp",
        "--operators",
        "3",
        "--duration",
        "20",
        "--require",
        "p_overcharge<=0.5",
        "--require",
        "p_fail_regulation<=0.5",
        "--minimise",
        "mean_operator_power_w",
        "--pareto",
        "charge_mean_ah",
        "--refine-evals",
        "6",
        "--out",
        out,
    ]
    .map(String::from)
    .to_vec()
}

fn strs(v: &[String]) -> Vec<&str> {
    v.iter().map(String::as_str).collect()
}

#[test]
fn three_shards_merged_equal_the_unsharded_study_byte_for_byte() {
    let wd = WorkDir::new();
    run_ok(&wd, &strs(&small_study("whole")));
    for k in 1..=3 {
        let mut a = small_study(&format!("part{k}"));
        a.extend(["--shard".to_string(), format!("{k}/3")]);
        // One part on one thread: the result may not depend on the thread count.
        let threads = if k == 2 { "1" } else { "2" };
        run_env(&wd, &strs(&a), &[("RAYON_NUM_THREADS", threads)]);
        let (_, rows) = read_csv(&wd.path(&format!("part{k}/points.csv")));
        let (h, _) = read_csv(&wd.path(&format!("part{k}/points.csv")));
        let points = column(&h, &rows, "point");
        assert!(
            points.iter().all(|&p| p as usize % 3 == k - 1),
            "part {k} holds only its own points: {points:?}"
        );
        let part = read_json(&wd.path(&format!("part{k}/search.json")));
        assert_eq!(part["refined_points"], 0, "parts are not refined");
    }
    // Parts in any order.
    let stdout = run_ok(
        &wd,
        &["merge", "part3", "part1", "part2", "--out", "joined"],
    );
    assert!(stdout.contains("complete"), "{stdout}");
    let whole = files(&wd.path("whole"));
    let joined = files(&wd.path("joined"));
    for name in [
        "points.csv",
        "search.json",
        "best.ron",
        "settings.json",
        "points.png",
        "points.svg",
        "pareto.png",
        "pareto.svg",
    ] {
        assert!(
            whole.contains_key(name),
            "{name} missing from the unsharded study"
        );
    }
    assert_eq!(
        whole.keys().collect::<Vec<_>>(),
        joined.keys().collect::<Vec<_>>()
    );
    for (name, bytes) in &whole {
        assert!(joined[name] == *bytes, "{name} differs after merge");
    }
    let s = read_json(&wd.path("joined/search.json"));
    assert!(
        s["refined_points"].as_u64().unwrap_or(0) > 0,
        "the merged study was refined"
    );

    // A missing part and a part of another study are refused.
    let err = run_code(&wd, &["merge", "part1", "part2", "--out", "x"], 2);
    assert!(err.contains("3/3 missing"), "{err}");
    let mut other = small_study("other2");
    other.extend(["--shard".to_string(), "2/3".to_string()]);
    other[6] = "4".to_string(); // --operators 4
    run_ok(&wd, &strs(&other));
    let err = run_code(&wd, &["merge", "part1", "other2", "part3", "--out", "x"], 2);
    assert!(err.contains("operators"), "{err}");
}

#[test]
fn resume_runs_only_the_missing_points_and_refuses_other_arguments() {
    let wd = WorkDir::new();
    let args = small_study("s");
    run_ok(&wd, &strs(&args));
    let full = fs::read_to_string(wd.path("s/points.csv")).expect("read");
    let lines: Vec<&str> = full.lines().collect();
    let (h, rows) = read_csv(&wd.path("s/points.csv"));
    let charge_col = h
        .iter()
        .position(|c| c == "charge_mean_ah")
        .expect("column");
    assert!(rows[1][charge_col].parse::<f64>().is_ok());

    // An interrupted study: the header, points 0 and 1 (point 1 marked so that a rerun would
    // show), and half a line.
    let mut marked: Vec<String> = rows[1].clone();
    marked[charge_col] = "12345".to_string();
    let mut cut = format!("{}\n{}\n{}\n", lines[0], lines[1], marked.join(","));
    cut.push_str(&lines[3][..lines[3].len() / 2]);
    fs::write(wd.path("s/points.csv"), cut).expect("write");
    for f in ["search.json", "best.ron", "points.png"] {
        fs::remove_file(wd.path(&format!("s/{f}"))).expect("remove");
    }
    let mut resume = args.clone();
    resume.push("--resume".into());
    run_ok(&wd, &strs(&resume));
    let (h2, rows2) = read_csv(&wd.path("s/points.csv"));
    assert_eq!(h2, h);
    assert_eq!(rows2.len(), rows.len(), "every point once");
    assert_eq!(
        rows2[1][charge_col], "12345",
        "point 1 was kept, not run again"
    );
    for (i, (a, b)) in rows.iter().zip(&rows2).enumerate() {
        if i != 1 {
            // The refined points follow from the design points' figures; with point 1 changed
            // they may differ, but the design rows are the same.
            if h.iter().position(|c| c == "origin").map(|k| a[k] == "grid") == Some(true) {
                assert_eq!(a, b, "row {i}");
            }
        }
    }
    assert!(wd.path("s/best.ron").exists());

    // The same folder with other arguments is refused, naming what differs.
    let mut other = resume.clone();
    other[6] = "5".to_string();
    let err = run_code(&wd, &strs(&other), 2);
    assert!(err.contains("operators"), "{err}");
    // Nothing to resume: the study starts (a batch job can always pass --resume), and gives the
    // same rows as a fresh one.
    let mut none = small_study("empty");
    none.push("--resume".into());
    run_ok(&wd, &strs(&none));
    let fresh = fs::read(wd.path("empty/points.csv")).expect("read");
    run_ok(&wd, &strs(&small_study("again")));
    assert!(fresh == fs::read(wd.path("again/points.csv")).expect("read"));
}

#[test]
fn resumed_study_with_every_row_kept_writes_the_same_bytes() {
    let wd = WorkDir::new();
    let args = small_study("s");
    run_ok(&wd, &strs(&args));
    let before = files(&wd.path("s"));
    let mut resume = args.clone();
    resume.push("--resume".into());
    run_ok(&wd, &strs(&resume));
    let after = files(&wd.path("s"));
    for (name, bytes) in &before {
        assert!(after.get(name) == Some(bytes), "{name} changed on resume");
    }
}

// ---------------------------------------------------------------------------------------------
// What a search writes
// ---------------------------------------------------------------------------------------------

#[test]
fn search_columns_intervals_pareto_and_best_setup() {
    let wd = WorkDir::new();
    run_ok(&wd, &strs(&small_study("s")));
    let (h, rows) = read_csv(&wd.path("s/points.csv"));
    assert_eq!(h[0], "drive.stages.0.ratio");
    assert_eq!(h[1], "battery.chemistry");
    assert_eq!(h.last().map(String::as_str), Some("feasible"));
    assert!(rows.len() >= 10, "10 grid points, then refined ones");
    let n = column(&h, &rows, "operators");
    for p in ["p_overcharge", "p_fail_regulation", "p_operator_overload"] {
        let v = column(&h, &rows, p);
        let lo = column(&h, &rows, &format!("{p}_lo"));
        let hi = column(&h, &rows, &format!("{p}_hi"));
        for i in 0..rows.len() {
            // Source: Wilson, "Probable inference, the law of succession, and statistical
            // inference", JASA 22 (1927): the score interval (p + z²/2n ± z·√(p(1−p)/n + z²/4n²))
            // / (1 + z²/n), z = 1.96 for 95 %.
            let (z, nn) = (1.96, n[i]);
            let centre = (v[i] + z * z / (2.0 * nn)) / (1.0 + z * z / nn);
            let half = z * (v[i] * (1.0 - v[i]) / nn + z * z / (4.0 * nn * nn)).sqrt()
                / (1.0 + z * z / nn);
            assert!(
                (lo[i] - (centre - half).max(0.0)).abs() < 1e-3,
                "{p} row {i}"
            );
            assert!(
                (hi[i] - (centre + half).min(1.0)).abs() < 1e-3,
                "{p} row {i}"
            );
            assert!(lo[i] <= v[i] && v[i] <= hi[i]);
            // k of n operators.
            let k = v[i] * nn;
            assert!((k - k.round()).abs() < 1e-9, "{p} = {} of {nn}", v[i]);
        }
    }
    // The Pareto column marks exactly the feasible points no other feasible point beats on both
    // objectives (power down, charge up).
    let power = column(&h, &rows, "mean_operator_power_w");
    let charge = column(&h, &rows, "charge_mean_ah");
    let feasible = text_col(&h, &rows, "feasible");
    let pareto = text_col(&h, &rows, "pareto");
    let mut on_front = 0;
    for i in 0..rows.len() {
        let dominated = (0..rows.len()).any(|j| {
            feasible[j] == "true"
                && power[j] <= power[i]
                && charge[j] >= charge[i]
                && (power[j] < power[i] || charge[j] > charge[i])
        });
        let expected = feasible[i] == "true" && !dominated;
        assert_eq!(pareto[i] == "true", expected, "row {i}");
        on_front += usize::from(expected);
    }
    assert!(on_front >= 1);
    // The categorical axis is drawn as categories.
    let svg = fs::read_to_string(wd.path("s/points.svg")).expect("svg");
    let texts: Vec<&str> = svg.lines().map(str::trim).collect();
    assert!(
        texts.contains(&"nmc") && texts.contains(&"lfp"),
        "category labels"
    );

    // best.ron: the user's text (comments kept) with the best values; `run` takes it unchanged.
    let s = read_json(&wd.path("s/search.json"));
    let best = &s["best"];
    assert_eq!(best["feasible"], true);
    let text = fs::read_to_string(wd.path("s/best.ron")).expect("best.ron");
    assert!(
        text.contains("INVENTED DEMO DATA"),
        "the demo's own comments are kept"
    );
    #[derive(Deserialize)]
    struct Best {
        drive: DriveFile,
        battery: BatteryChem,
    }
    #[derive(Deserialize)]
    struct BatteryChem {
        chemistry: Chemistry,
    }
    #[derive(Debug, Deserialize)]
    #[serde(rename_all = "snake_case")]
    enum Chemistry {
        Nmc,
        Lfp,
    }
    let parsed: Best = parse_ron(&text, "best.ron");
    let value = |k: usize| {
        best["values"][k]["value"]
            .as_str()
            .expect("value")
            .to_string()
    };
    assert_eq!(
        parsed.drive.stages[0].ratio,
        value(0).parse::<f64>().expect("ratio")
    );
    assert_eq!(
        format!("{:?}", parsed.battery.chemistry).to_lowercase(),
        value(1)
    );
    let out = run_ok(
        &wd,
        &[
            "run",
            "s/best.ron",
            "--duration",
            "5",
            "--no-plot",
            "--out",
            "r",
        ],
    );
    assert!(out.contains("verdict"), "{out}");
    assert!(
        !wd.path("s/best-profile.ron").exists(),
        "no profile key was varied"
    );
}

#[test]
fn more_than_three_axes_take_a_latin_hypercube_and_integer_fields_stay_whole() {
    let wd = WorkDir::new();
    let out = run_ok(
        &wd,
        &[
            "search",
            "--vary",
            "drive.stages.0.ratio=3..7:5",
            "--vary",
            "battery.cells_parallel=1..3:3",
            "--vary",
            "converter.charge_current_a=1,1.5,2",
            "--vary",
            "profile.cadence_scale=0.8..1.2:3",
            "--samples",
            "12",
            "--duration",
            "10",
            "--refine-starts",
            "0",
            "--out",
            "s",
        ],
    );
    assert!(out.contains("12 design point(s)"), "{out}");
    let (h, rows) = read_csv(&wd.path("s/points.csv"));
    assert_eq!(rows.len(), 12);
    assert!(text_col(&h, &rows, "origin").iter().all(|o| o == "sample"));
    // Source: McKay, Beckman & Conover, Technometrics 21(2), 1979: each of the n strata of a
    // continuous input holds exactly one sample.
    let ratio = column(&h, &rows, "drive.stages.0.ratio");
    let mut strata: Vec<usize> = ratio
        .iter()
        .map(|r| (((r - 3.0) / 4.0 * 12.0).floor() as usize).min(11))
        .collect();
    strata.sort_unstable();
    strata.dedup();
    assert!(strata.len() >= 11, "strata used: {strata:?}");
    for v in text_col(&h, &rows, "battery.cells_parallel") {
        assert!(["1", "2", "3"].contains(&v.as_str()), "{v}");
    }
    let s = read_json(&wd.path("s/search.json"));
    assert_eq!(s["settings"]["design"]["kind"], "lhs");
    assert_eq!(s["settings"]["axes"][1]["kind"], "integer");
    assert_eq!(s["settings"]["axes"][2]["kind"], "numbers");
    // A profile key was varied: the best point's profile is written too, and runs.
    assert!(wd.path("s/best-profile.ron").exists());
    run_ok(
        &wd,
        &[
            "run",
            "s/best.ron",
            "--profile",
            "s/best-profile.ron",
            "--duration",
            "5",
            "--no-plot",
            "--out",
            "r",
        ],
    );
}

#[test]
fn search_bad_input_exits_2_naming_the_problem() {
    let wd = WorkDir::new();
    let cases: [(&[&str], &str); 7] = [
        (
            &["--vary", "drive.stages.9.ratio=2,3"],
            "drive.stages.9.ratio",
        ),
        (
            &["--vary", "battery.chemistry=nmc,unobtainium"],
            "unobtainium",
        ),
        (&["--vary", "drive.stages.0.ratio=2..8"], "A..B:N"),
        (
            &[
                "--vary",
                "drive.stages.0.ratio=2,3",
                "--require",
                "p_magic<=1",
            ],
            "p_magic",
        ),
        (
            &[
                "--vary",
                "drive.stages.0.ratio=2,3",
                "--minimise",
                "battery.chemistry",
            ],
            "battery.chemistry",
        ),
        (
            &["--vary", "drive.stages.0.ratio=2,3", "--shard", "4/3"],
            "K/N",
        ),
        (
            &[
                "--vary",
                "drive.stages.0.ratio=2..3:200",
                "--vary",
                "drive.stages.1.ratio=2..3:200",
            ],
            "grid has 40000 points",
        ),
    ];
    for (extra, needle) in cases {
        let mut args = vec!["search", "--duration", "5", "--out", "s"];
        args.extend(extra);
        let err = run_code(&wd, &args, 2);
        assert!(err.contains(needle), "{extra:?}: {err}");
        assert!(!wd.path("s/points.csv").exists(), "{extra:?}: nothing run");
    }
}

#[test]
fn ctrl_c_leaves_the_finished_points_and_resume_completes_the_same_study() {
    let wd = WorkDir::new();
    let mut args = small_study("s");
    args[6] = "8".to_string(); // --operators 8
    args[8] = "120".to_string(); // --duration 120
    let mut child = std::process::Command::new(assert_cmd::cargo::cargo_bin("crankcharge"))
        .args(&args)
        .current_dir(wd.dir.path())
        .stdout(std::process::Stdio::null())
        .stderr(std::process::Stdio::null())
        .spawn()
        .expect("spawn");
    let points = wd.path("s/points.csv");
    let started = std::time::Instant::now();
    let rows_on_disk = || {
        fs::read_to_string(&points)
            .map(|t| t.lines().count().saturating_sub(1))
            .unwrap_or(0)
    };
    while rows_on_disk() < 2 && started.elapsed().as_secs() < 60 {
        std::thread::sleep(std::time::Duration::from_millis(5));
    }
    let killed = std::process::Command::new("kill")
        .args(["-INT", &child.id().to_string()])
        .status()
        .expect("kill");
    assert!(killed.success());
    let status = child.wait().expect("wait");
    assert!(!status.success(), "the study was interrupted, not finished");
    let kept = rows_on_disk();
    assert!(kept >= 2, "finished points stay on disk ({kept})");
    assert!(
        !wd.path("s/search.json").exists(),
        "an interrupted study is not finished"
    );

    let mut resume = args.clone();
    resume.push("--resume".into());
    run_ok(&wd, &strs(&resume));
    let mut whole = args.clone();
    let last = whole.len() - 1;
    whole[last] = "whole".to_string();
    run_ok(&wd, &strs(&whole));
    let (a, b) = (files(&wd.path("s")), files(&wd.path("whole")));
    assert_eq!(a.keys().collect::<Vec<_>>(), b.keys().collect::<Vec<_>>());
    for (name, bytes) in &a {
        assert!(b[name] == *bytes, "{name} differs after the resumed study");
    }
}

#[test]
fn sweep_of_words_draws_them_as_categories() {
    let wd = WorkDir::new();
    run_ok(
        &wd,
        &[
            "sweep",
            "--param",
            "battery.chemistry",
            "--values",
            "nmc,lfp",
            "--duration",
            "10",
            "--out",
            "w",
        ],
    );
    let svg = fs::read_to_string(wd.path("w/sweep.svg")).expect("svg");
    let texts: Vec<&str> = svg.lines().map(str::trim).collect();
    assert!(
        texts.contains(&"nmc") && texts.contains(&"lfp"),
        "category labels"
    );
    assert!(
        !svg.contains("value number"),
        "words are not drawn as numbers"
    );
}

//! Sweeps as a cluster runs them: shards as separate processes, merged; a sweep killed part
//! way and run again; records that must not be mixed. The reference each time is the same
//! sweep run whole in one process: its JSON summary must come out byte for byte.

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

const SIM: &str = env!("CARGO_BIN_EXE_coilward-sim");

fn demo(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("../examples/scenarios")
        .join(name)
}

fn sim(args: &[&str]) -> Output {
    Command::new(SIM)
        .args(args)
        .output()
        .expect("coilward-sim runs")
}

fn text(p: &Path) -> String {
    std::fs::read_to_string(p).expect("readable")
}

/// The whole sweep's JSON summary, from one process without records.
fn whole(dir: &Path, file: &Path, size: &str, seed: &str) -> String {
    let json = dir.join("whole.json");
    let f = file.to_str().unwrap();
    sim(&[
        "sweep",
        f,
        "--samples",
        size,
        "--seed",
        seed,
        "--json",
        json.to_str().unwrap(),
    ]);
    text(&json)
}

#[test]
fn shards_run_apart_and_merged_give_the_whole_sweep() {
    let dir = tempfile::tempdir().unwrap();
    // Every sample is limited (the guard acts): the whole sweep exits 3, each shard 0 (its
    // verdicts are in its records), the merge 3 again.
    let file = demo("valve-at-ceiling.toml");
    let f = file.to_str().unwrap();
    let reference = whole(dir.path(), &file, "60", "5");
    assert!(reference.contains("\"limited\": 60"), "{reference}");
    let parts: Vec<PathBuf> = (1..=3)
        .map(|k| dir.path().join(format!("part{k}.jsonl")))
        .collect();
    let shards: Vec<_> = (1..=3)
        .map(|k| {
            let p = parts[k - 1].to_str().unwrap().to_string();
            let shard = format!("{k}/3");
            Command::new(SIM)
                .args([
                    "sweep",
                    f,
                    "--samples",
                    "60",
                    "--seed",
                    "5",
                    "--shard",
                    &shard,
                ])
                .args(["--records", &p])
                .spawn()
                .expect("shard starts")
        })
        .collect();
    for mut s in shards {
        assert_eq!(
            s.wait().unwrap().code(),
            Some(0),
            "a shard that ran exits 0"
        );
    }
    let merged = dir.path().join("merged.json");
    let mut args = vec!["merge"];
    args.extend(parts.iter().map(|p| p.to_str().unwrap()));
    args.extend(["--json", merged.to_str().unwrap()]);
    let out = sim(&args);
    assert_eq!(out.status.code(), Some(3), "{out:?}");
    assert_eq!(text(&merged), reference);
}

#[test]
fn a_killed_sweep_resumes_to_the_same_result() {
    let dir = tempfile::tempdir().unwrap();
    let file = demo("valve-at-ceiling.toml");
    let f = file.to_str().unwrap();
    let reference = whole(dir.path(), &file, "800", "2");
    let records = dir.path().join("r.jsonl");
    let r = records.to_str().unwrap();
    let json = dir.path().join("resumed.json");
    let args = [
        "sweep",
        f,
        "--samples",
        "800",
        "--seed",
        "2",
        "--records",
        r,
    ];
    let mut child = Command::new(SIM).args(args).spawn().unwrap();
    // Killed once a few samples are written (mid-write, as likely as not).
    let t0 = std::time::Instant::now();
    let written = || std::fs::read_to_string(&records).unwrap_or_default();
    while written().lines().count() < 40 && t0.elapsed().as_secs() < 120 {
        std::thread::sleep(std::time::Duration::from_millis(5));
    }
    child.kill().unwrap();
    child.wait().unwrap();
    let kept = text(&records).lines().count();
    assert!(kept < 801, "the sweep finished before it was killed");
    let out = sim(&[&args[..], &["--json", json.to_str().unwrap()]].concat());
    assert_eq!(out.status.code(), Some(0), "{out:?}");
    assert!(String::from_utf8_lossy(&out.stdout).contains("resuming"));
    assert_eq!(text(&json), reference);
    assert_eq!(text(&records).lines().count(), 801);
}

#[test]
fn a_record_cut_short_is_dropped_and_run_again() {
    let dir = tempfile::tempdir().unwrap();
    let file = demo("relay-zener.toml");
    let f = file.to_str().unwrap();
    let reference = whole(dir.path(), &file, "120", "4");
    let records = dir.path().join("r.jsonl");
    let r = records.to_str().unwrap();
    let args = [
        "sweep",
        f,
        "--samples",
        "120",
        "--seed",
        "4",
        "--records",
        r,
    ];
    assert_eq!(sim(&args).status.code(), Some(0));
    // Keep the header, 50 samples and half of the 51st.
    let all = text(&records);
    let lines: Vec<&str> = all.lines().collect();
    let cut = format!("{}\n{}", lines[..51].join("\n"), &lines[51][..40]);
    std::fs::write(&records, cut).unwrap();
    let json = dir.path().join("resumed.json");
    let out = sim(&[&args[..], &["--json", json.to_str().unwrap()]].concat());
    assert!(String::from_utf8_lossy(&out.stdout).contains("resuming: 50 samples"));
    assert_eq!(text(&json), reference);
    let mut a: Vec<&str> = all.lines().collect();
    let now = text(&records);
    let mut b: Vec<&str> = now.lines().collect();
    a.sort_unstable();
    b.sort_unstable();
    assert_eq!(a, b, "the same records, in another order");
}

#[test]
fn records_of_different_sweeps_are_not_mixed() {
    let dir = tempfile::tempdir().unwrap();
    let file = demo("relay-zener.toml");
    let f = file.to_str().unwrap();
    let path = |n: &str| dir.path().join(n).to_str().unwrap().to_string();
    let (a, b, c) = (path("a.jsonl"), path("b.jsonl"), path("c.jsonl"));
    for (rec, seed, shard) in [(&a, "1", "1/2"), (&b, "2", "2/2"), (&c, "1", "2/2")] {
        let args = [
            "sweep",
            f,
            "--samples",
            "20",
            "--seed",
            seed,
            "--shard",
            shard,
        ];
        assert_eq!(
            sim(&[&args[..], &["--records", rec]].concat())
                .status
                .code(),
            Some(0)
        );
    }
    let refused = |args: &[&str], why: &str| {
        let out = sim(args);
        assert_eq!(out.status.code(), Some(2), "{args:?}");
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(err.contains(why), "{args:?}: {err}");
    };
    refused(&["merge", &a, &b], "seed 2 against 1");
    refused(&["merge", &a, &c, &a], "already counted");
    // Resuming into another sweep's file, or another shard's.
    let sweep = ["sweep", f, "--samples", "20", "--records", &b];
    refused(
        &[&sweep[..], &["--seed", "1", "--shard", "2/2"]].concat(),
        "seed 2 against 1",
    );
    refused(
        &[&sweep[..], &["--seed", "2", "--shard", "1/2"]].concat(),
        "holds shard 2/2",
    );
    // A shard cut short is finished first, not merged.
    std::fs::write(&c, text(Path::new(&c)).trim_end_matches('\n')).unwrap();
    refused(&["merge", &a, &c], "cut short");
    // Finished, the two halves of seed 1 merge into the whole sweep.
    let rest = [
        "sweep",
        f,
        "--samples",
        "20",
        "--seed",
        "1",
        "--shard",
        "2/2",
    ];
    assert_eq!(
        sim(&[&rest[..], &["--records", &c]].concat()).status.code(),
        Some(0)
    );
    let out = sim(&["merge", &a, &c]);
    assert_eq!(out.status.code(), Some(0));
    assert!(String::from_utf8_lossy(&out.stdout).contains("20 of 20 samples"));
}

//! The sweep's failure bound against SciPy (`scipy.stats.beta.ppf`, a general-purpose
//! reference; Debian package `python3-scipy`): the Clopper–Pearson one-sided upper bound for k
//! failures in n samples is the 0.95 quantile of Beta(k + 1, n − k).
//!
//! Without a Python that imports SciPy the check is skipped with a message, unless
//! `COILWARD_REQUIRE_TOOLS` is set (the test command sets it and installs SciPy).

use coilward_sim::sweep::summary::upper_bound;
use std::process::Command;

/// A Python interpreter that imports SciPy: `python3` on the `PATH`, else the system's.
fn python_with_scipy() -> Option<&'static str> {
    let found = ["python3", "/usr/bin/python3"].into_iter().find(|p| {
        Command::new(p)
            .args(["-c", "import scipy.stats"])
            .output()
            .is_ok_and(|o| o.status.success())
    });
    assert!(
        found.is_some() || std::env::var_os("COILWARD_REQUIRE_TOOLS").is_none(),
        "SciPy must be installed (the README's test command installs it: apt-get install python3-scipy)"
    );
    if found.is_none() {
        eprintln!("SciPy is not installed: the cross-check against it is skipped");
    }
    found
}

#[test]
fn failure_bound_matches_scipy() {
    let Some(python) = python_with_scipy() else {
        return;
    };
    let cases: Vec<(u64, u64)> = vec![
        (0, 1),
        (0, 30),
        (0, 1000),
        (0, 100_000),
        (1, 10),
        (1, 1000),
        (3, 50),
        (7, 200),
        (12, 1000),
        (50, 100),
        (99, 100),
        (250, 100_000),
    ];
    let list: Vec<String> = cases.iter().map(|(k, n)| format!("({k},{n})")).collect();
    let script = format!(
        "from scipy.stats import beta\nfor k, n in [{}]:\n    print(repr(float(beta.ppf(0.95, k + 1, n - k))))",
        list.join(",")
    );
    let out = Command::new(python)
        .args(["-c", &script])
        .output()
        .expect("python runs");
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let text = String::from_utf8(out.stdout).expect("utf-8");
    let want: Vec<f64> = text.lines().map(|l| l.parse().expect("a number")).collect();
    assert_eq!(want.len(), cases.len());
    for (&(k, n), w) in cases.iter().zip(want) {
        let got = upper_bound(k, n, 0.95);
        assert!(
            (got / w - 1.0).abs() < 1e-12,
            "k {k} n {n}: {got} against SciPy's {w}"
        );
    }
}

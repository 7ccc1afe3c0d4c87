//! Outside-world reference check: `headroom analyze --json` step metrics against python-control's
//! `step_info` (0.10.2) on a corpus of invented closed-loop episodes, by running
//! `tests/reference/step_info_check.py`.
//!
//! The interpreter is `HEADROOM_PYTHON` if set, else `target/pyenv/bin/python` under the crate
//! root if it exists, else `python3`. A missing interpreter or package fails this test with the
//! install command; it never skips.

use std::path::{Path, PathBuf};
use std::process::Command;

use crate::common::headroom_bin;

const INSTALL: &str = "python3 -m venv target/pyenv && \
                       target/pyenv/bin/pip install -r tests/reference/requirements.txt \
                       (run from the crate root; or set HEADROOM_PYTHON to an interpreter \
                       that has numpy, scipy and control)";

fn crate_root() -> &'static Path {
    Path::new(env!("CARGO_MANIFEST_DIR"))
}

fn python() -> PathBuf {
    if let Some(p) = std::env::var_os("HEADROOM_PYTHON").filter(|p| !p.is_empty()) {
        return PathBuf::from(p);
    }
    let venv = crate_root().join("target/pyenv/bin/python");
    if venv.exists() {
        venv
    } else {
        PathBuf::from("python3")
    }
}

#[test]
fn step_metrics_match_python_control_step_info() {
    let python = python();
    let script = crate_root().join("tests/reference/step_info_check.py");
    let workdir = tempfile::tempdir().expect("temporary directory");
    let output = Command::new(&python)
        .arg(&script)
        .arg("--headroom")
        .arg(headroom_bin())
        .arg("--workdir")
        .arg(workdir.path())
        .output()
        .unwrap_or_else(|e| {
            panic!(
                "cannot run the Python interpreter {} ({e}).\nInstall the reference-check \
                 environment with:\n    {INSTALL}",
                python.display()
            )
        });
    let stdout = String::from_utf8_lossy(&output.stdout);
    let stderr = String::from_utf8_lossy(&output.stderr);
    let code = output.status.code();
    let hint = match code {
        Some(3) => format!("a Python package is missing. Install with:\n    {INSTALL}\n"),
        Some(2) => "the headroom binary could not be run by the check.\n".to_string(),
        _ => String::new(),
    };
    assert!(
        output.status.success(),
        "{} exited with {code:?}.\n{hint}--- stdout ---\n{stdout}\n--- stderr ---\n{stderr}",
        script.display()
    );
    // A zero exit must also come with the summary line and no failures, or nothing was checked.
    let summary = stdout
        .lines()
        .rev()
        .find(|l| !l.trim().is_empty())
        .unwrap_or("");
    let (passed, failed) = parse_summary(summary)
        .unwrap_or_else(|| panic!("no `N passed, M failed` summary line:\n{stdout}\n{stderr}"));
    assert_eq!(failed, 0, "{stdout}");
    assert!(
        passed >= 20,
        "only {passed} cases passed; expected the whole corpus:\n{stdout}"
    );
}

/// Parses `N passed, M failed`.
fn parse_summary(line: &str) -> Option<(u32, u32)> {
    let (p, f) = line.trim().split_once(", ")?;
    let passed = p.strip_suffix(" passed")?.parse().ok()?;
    let failed = f.strip_suffix(" failed")?.parse().ok()?;
    Some((passed, failed))
}

#[test]
fn summary_line_parser() {
    assert_eq!(parse_summary("26 passed, 0 failed"), Some((26, 0)));
    assert_eq!(parse_summary("3 passed, 2 failed\n"), Some((3, 2)));
    assert_eq!(parse_summary("PASS  well_tuned_ts1"), None);
    assert_eq!(parse_summary("3 passed"), None);
}

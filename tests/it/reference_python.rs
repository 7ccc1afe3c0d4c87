//! Outside-world reference checks, by running scripts in `tests/reference/` with python-control
//! (0.10.2):
//! - `headroom analyze --json` step metrics against `step_info` on a corpus of invented
//!   closed-loop episodes (`step_info_check.py`);
//! - the verified PI suggestion (settling, overshoot, Ms) against a Padé closed loop and an
//!   exact-delay frequency response (`tuning_check.py`).
//!
//! The interpreter is `HEADROOM_PYTHON` if set, else `target/pyenv/bin/python` under the crate
//! root if it exists, else `python3`. A missing interpreter or package fails this test with the
//! install command; it never skips.

use std::path::{Path, PathBuf};
use std::process::Command;

use crate::common::headroom_bin;
use crate::retune_corpus::fopdt_model;
use headroom::analysis::identify::{Family, Model};
use headroom::analysis::metrics::OpRange;
use headroom::analysis::tuning::{self, Target};

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
    let workdir = tempfile::tempdir().expect("temporary directory");
    let (passed, stdout) = run_check(
        "tests/reference/step_info_check.py",
        &[
            "--headroom".as_ref(),
            headroom_bin().as_os_str(),
            "--workdir".as_ref(),
            workdir.path().as_os_str(),
        ],
    );
    assert!(
        passed >= 20,
        "only {passed} cases passed; expected the whole corpus:\n{stdout}"
    );
}

/// Runs a reference script with `args`, requires a zero exit with an `N passed, 0 failed`
/// summary line, and returns N with the script's output.
pub(crate) fn run_check(script: &str, args: &[&std::ffi::OsStr]) -> (u32, String) {
    let python = python();
    let script = crate_root().join(script);
    let output = Command::new(&python)
        .arg(&script)
        .args(args)
        .output()
        .unwrap_or_else(|e| {
            panic!(
                "cannot run the Python interpreter {} ({e}).\nInstall the reference-check \
                 environment with:\n    {INSTALL}",
                python.display()
            )
        });
    let stdout = String::from_utf8_lossy(&output.stdout).into_owned();
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
    (passed, stdout)
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

/// The models of the tuning check: first order with θ/τ from 0.1 to 2 in both signs, plus a
/// second-order and an integrating one; (family fields, first-order equivalent for SIMC).
fn tuning_models() -> Vec<(&'static str, Model)> {
    let fo = fopdt_model;
    let mut out = vec![
        ("fo_r0.1_pos", fo(2.0, 100.0, 10.0)),
        ("fo_r0.3_neg", fo(-0.8, 50.0, 15.0)),
        ("fo_r0.7_pos", fo(1.5, 20.0, 14.0)),
        ("fo_r1_neg", fo(-3.0, 10.0, 10.0)),
        ("fo_r2_pos", fo(0.5, 30.0, 60.0)),
        ("fo_r2_neg", fo(-1.2, 5.0, 10.0)),
    ];
    // Half rule for the first-order equivalents (Skogestad 2003): τ = τ1 + τ2/2, θ + τ2/2.
    let mut second = fo(1.1, 60.0 + 10.0, 4.0 + 10.0);
    second.family = Family::SecondOrder {
        first_time_constant_s: 60.0,
        second_time_constant_s: 20.0,
        process_dead_time_s: 4.0,
    };
    out.push(("so_pos", second));
    let mut level = fo(1.0, 1e4, 5.0 + 3.0);
    level.family = Family::Integrating {
        gain_per_s: -0.02,
        lag_s: Some(6.0),
        process_dead_time_s: 5.0,
    };
    out.push(("int_lag_neg", level));
    out
}

#[test]
fn verified_pi_suggestions_match_python_control() {
    let mut cases = Vec::new();
    for (name, model) in tuning_models() {
        let theta = model.dead_time_s;
        for tau_c_per_theta in [0.5, 1.0, 3.0] {
            let step = if model.gain > 0.0 { 1.0 } else { -2.0 };
            let ideal = tuning::simc_for(&model, step, tau_c_per_theta * theta);
            let scale = model.time_constant_s.min(1e3) + theta + ideal.integral_time_s;
            let sample_s = scale / 400.0;
            let target = Target {
                step,
                from_op: 50.0,
                // Far away: the unsaturated case.
                op: OpRange {
                    min: -1e6,
                    max: 1e6,
                },
                band: 0.02 * step.abs(),
                spec_s: f64::INFINITY,
                max_overshoot_pct: None,
                achieved_settling_s: None,
            };
            let v = tuning::verify(&model, &ideal, &target, sample_s);
            let mut case = serde_json::json!({
                "name": format!("{name}_tc{tau_c_per_theta}"),
                "kc": ideal.gain,
                "ti_s": ideal.integral_time_s,
                "step": step,
                "band": target.band,
                "sample_s": sample_s,
                "horizon_s": 30.0 * scale,
                "time_scale_s": scale,
                "settling_time_s": v.settling_time_s,
                "overshoot_pct": v.overshoot_pct,
                "max_sensitivity": v.max_sensitivity,
            });
            let fields = match model.family {
                Family::SecondOrder {
                    first_time_constant_s,
                    second_time_constant_s,
                    process_dead_time_s,
                } => serde_json::json!({"family": "second_order", "gain": model.gain,
                    "tau1_s": first_time_constant_s, "tau2_s": second_time_constant_s,
                    "theta_s": process_dead_time_s}),
                Family::Integrating {
                    gain_per_s,
                    lag_s,
                    process_dead_time_s,
                } => serde_json::json!({"family": "integrating", "rate": gain_per_s,
                    "lag_s": lag_s.unwrap_or(0.0), "theta_s": process_dead_time_s}),
                _ => serde_json::json!({"family": "first_order", "gain": model.gain,
                    "tau_s": model.time_constant_s, "theta_s": theta}),
            };
            for (k, v) in fields.as_object().unwrap() {
                case[k] = v.clone();
            }
            cases.push(case);
        }
    }
    let dir = tempfile::tempdir().expect("temporary directory");
    let file = dir.path().join("tuning_cases.json");
    std::fs::write(&file, serde_json::to_vec(&cases).unwrap()).expect("write the cases");
    let (passed, stdout) = run_check(
        "tests/reference/tuning_check.py",
        &["--cases".as_ref(), file.as_os_str()],
    );
    eprintln!("{stdout}");
    assert_eq!(passed as usize, cases.len(), "{stdout}");
}

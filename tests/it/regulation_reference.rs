//! The minimum-variance (Harris) index against an independent computation: statsmodels' least
//! squares AR fit and scipy's impulse response on the same PV deviations
//! (`tests/reference/harris_check.py`, which states the method).
//!
//! Closed loops of our own invention (first-order processes with dead times of 2, 5 and 10 s and
//! an integrating one, each under a tight and a gentle PI, random loads on the PV) are run
//! through the whole analysis; the holds it found, the AR order and the identified dead time go
//! to the script with the index the report carries, and for each loop also its longest hold
//! alone with the index of that hold. The estimators are the same least squares, so the script
//! requires agreement to 1e-6. The interpreter is found as for the other reference checks
//! (`reference_python`), and a missing one fails this test with the install command.

use crate::common::sim as loopsim;
use crate::reference_python::run_check;
use crate::regulation_corpus::simulated::{
    Load, SAMPLE_S, Scenario, fopdt, plant, record, schedule, simc,
};
use headroom::analysis::regulation::{AR_ORDER, min_variance_index};
use headroom::analysis::sim::{Dynamics, IntegratingProcess};
use headroom::analysis::{Spec, analyze_loop, assess};

/// The loops: (name, process, τc over the effective dead time).
fn loops() -> Vec<(String, Dynamics, f64)> {
    let level = Dynamics::Integrating(IntegratingProcess {
        gain_per_s: 0.01,
        lag_s: 0.0,
        dead_time_s: 4.0,
        balance_op: 50.0,
    });
    let processes = [
        ("fo_theta2", fopdt(1.0, 20.0, 2.0)),
        ("fo_theta5", fopdt(1.5, 40.0, 5.0)),
        ("fo_theta10", fopdt(0.8, 30.0, 10.0)),
        ("int_theta4", level),
    ];
    processes
        .into_iter()
        .flat_map(|(name, d)| [1.0, 4.0].map(|tc| (format!("{name}_tc{tc}"), d, tc)))
        .collect()
}

#[test]
fn the_harris_index_matches_statsmodels_and_scipy() {
    let mut cases = Vec::new();
    for (k, (name, dynamics, tc)) in loops().into_iter().enumerate() {
        let theta = dynamics.dead_time_s();
        let pi = simc(&dynamics, tc * theta);
        let (schedule, duration_s) = schedule(3_000.0, 5.0);
        let run = Scenario {
            plant: plant(dynamics, pi, 0.05, 100 + k as u64),
            stiction: None,
            load: Load::FilteredNoise {
                sd: 0.3,
                lag_s: 5.0 * theta,
                seed: 200 + k as u64,
            },
            schedule,
            duration_s,
        };
        let series = record(&run, true).series();
        let setup = loopsim::setup("LOOP", &run.plant.controller, Spec::within(20.0 * theta));
        let report = analyze_loop(&series, &setup);
        let model = report.model.unwrap_or_else(|| panic!("{name}: no model"));
        let eta = report
            .regulation
            .min_variance_index
            .unwrap_or_else(|| panic!("{name}: no index"));
        let holds = assess::assess(&series, &setup).holds;
        let deviation = |h: &headroom::analysis::regulation::Hold| -> Vec<f64> {
            (h.start..h.end)
                .map(|i| series.pv()[i] - series.sp()[i])
                .collect()
        };
        let case = |name: String, holds: Vec<Vec<f64>>, eta: f64| {
            serde_json::json!({
                "name": name,
                "holds": holds,
                "order": AR_ORDER,
                "dead_time_s": model.dead_time_s,
                "sample_s": SAMPLE_S,
                "eta": eta,
            })
        };
        let name = format!(
            "{name} (θ {theta:.0} s, identified {:.1} s)",
            model.dead_time_s
        );
        cases.push(case(
            name.clone(),
            holds.iter().map(deviation).collect(),
            eta,
        ));
        let longest = *holds
            .iter()
            .max_by_key(|h| h.end - h.start)
            .expect("a hold");
        let alone = min_variance_index(&series, &[longest], Some(model.dead_time_s))
            .expect("an index of the longest hold");
        cases.push(case(
            format!("{name}, longest hold"),
            vec![deviation(&longest)],
            alone,
        ));
    }
    let dir = tempfile::tempdir().expect("temporary directory");
    let file = dir.path().join("harris_cases.json");
    std::fs::write(&file, serde_json::to_vec(&cases).unwrap()).expect("write the cases");
    let (passed, stdout) = run_check(
        "tests/reference/harris_check.py",
        &["--cases".as_ref(), file.as_os_str()],
    );
    eprintln!("{stdout}");
    assert_eq!(passed as usize, cases.len(), "{stdout}");
}

//! `headroom report` on a store seeded with known episodes: the numbers in all three formats,
//! a well-formed HTML file with well-formed SVG, a real headless browser's screenshot of it, and
//! the clear lines for an empty week, a loop without setpoint changes and one without a model.

use crate::common::run_headroom_text;
use crate::common::sim::store_samples;
use headroom::analysis::segment::{ChangeShape, WindowEnd};
use headroom::analysis::sim::{LoopSim, LoopSimConfig, PiController, Process};
use headroom::analysis::{EpisodeResult, Model, Verdict};
use headroom::sample::{Sample, Signal};
use headroom::store::{AlertInput, GapRow, Store};
use std::path::{Path, PathBuf};
use std::process::Command;
use std::sync::Arc;

/// Monday 2026-11-23 00:00 UTC: the start of ISO week 2026-W48.
pub(crate) const W48_MS: i64 = 1_795_392_000_000;
const WEEK_MS: i64 = 7 * 86_400_000;
pub(crate) const HOUR_MS: i64 = 3_600_000;

/// The Wrenmoor pilot plant's loops as the report sees them (no sources: the store is seeded).
const CONFIG: &str = r#"
[loops.TIC-101]
description = "R-1 jacket temperature, steam valve TV-101"
pv_unit = "°C"
op_min = 0
op_max = 100
expected_period_s = 10
spec = { settle_within_s = 900, max_overshoot_pct = 10 }

[loops.TIC-102]
description = "R-1 condenser outlet, cooling-water valve TV-102"
pv_unit = "°C"
op_min = 0
op_max = 100
expected_period_s = 10
spec = { settle_within_s = 600 }

[loops.FIC-201]
description = "Feed flow, pump P-201"
op_min = 0
op_max = 100
expected_period_s = 10
spec = { settle_within_s = 60 }

[loops.LIC-301]
description = "Receiver T-301 level"
op_min = 0
op_max = 100
expected_period_s = 10
spec = { settle_within_s = 1200 }

[report]
weekday = "monday"
time = "07:00"
folder = "reports"
"#;

#[allow(clippy::too_many_arguments)]
pub(crate) fn episode(
    verdict: Verdict,
    sp_from: f64,
    sp_to: f64,
    op_start: f64,
    op_headroom: f64,
    settling: Option<f64>,
    overshoot: f64,
    duty: f64,
) -> EpisodeResult {
    EpisodeResult {
        start_s: 0.0,
        end_s: 3_000.0,
        sp_from,
        sp_to,
        shape: ChangeShape::Step,
        window_end: WindowEnd::NextChange,
        samples: 300,
        settling_time_s: settling,
        overshoot_pct: overshoot,
        rise_time_s: None,
        iae_per_delta_s: 100.0,
        saturation_duty: duty,
        pv_smoothing_samples: 1,
        op_start,
        op_headroom,
        peak_op: op_start + op_headroom,
        min_settling_time_s: None,
        reach: None,
        required_op_limit: None,
        capacity_ratio: None,
        verdict,
        reason: format!("seeded {}", verdict.as_str()),
        start_pv: None,
        pv_moving: false,
        confidence: None,
        confidence_reasons: Vec::new(),
        min_settling_time_range_s: None,
        reach_range: None,
        capacity_ratio_range: None,
        bound_beaten: false,
        quality: Vec::new(),
        deciding_step: None,
    }
}

pub(crate) fn model(gain: f64, tau: f64, theta: f64) -> Model {
    Model::first_order(
        headroom::analysis::Fopdt {
            gain,
            time_constant_s: tau,
            dead_time_s: theta,
        },
        0.995,
        4,
        1_000,
    )
}

/// Samples of one simulated setpoint change starting at `t0_ms` (10 s apart), for the plot.
pub(crate) async fn simulated_change(
    store: &Store,
    tag: &str,
    t0_ms: i64,
    process: Process,
    controller: PiController,
    sp_from: f64,
    sp_to: f64,
) {
    let mut sim = LoopSim::new(LoopSimConfig {
        process,
        controller,
        step_s: 1.0,
        noise_sd: 0.02,
        seed: 7,
        initial_sp: sp_from,
    });
    let rows = sim.run(&[(600.0, sp_to)], 3_600.0, 10.0);
    let samples = store_samples(tag, &rows, |r| t0_ms - 600_000 + (r.time_s * 1000.0) as i64);
    store.insert_samples(&samples).await.unwrap();
}

/// The seeded plant. Week 2026-W48:
/// - TIC-101: 3 tuning-limited changes (1310, 1250, 1400 s) and 1 met (700 s); model K 0.55,
///   τ 600 s, θ 37 s, fitted this week; the model three weeks before was K 0.50, τ 560, θ 35.
///   Two met changes in 2026-W46 (500 s and 600 s).
/// - TIC-102: 3 actuator-limited +20 changes from OP 72 (headroom 28); model K 0.8, τ 300 s,
///   θ 30 s.
/// - FIC-201: 2 changes that missed but could not be judged (no model).
/// - LIC-301: samples only, no setpoint change; a stale-tag alert.
async fn seeded_store(path: &Path) -> Store {
    let store = Store::open(path).await.unwrap();
    let day = |d: i64, h: i64| W48_MS + d * 86_400_000 + h * HOUR_MS;
    let (met, tv, av, inc) = (
        Verdict::Met,
        Verdict::TuningLimited,
        Verdict::ActuatorLimited,
        Verdict::Inconclusive,
    );
    let w46 = W48_MS - 2 * WEEK_MS;
    let (t1, t2, f1) = ("TIC-101", "TIC-102", "FIC-201");
    // The final episodes: loop, start, result (each lasts 3,000 s).
    #[rustfmt::skip]
    let finals = [
        (t1, day(0, 8), episode(tv, 50.0, 55.0, 40.0, 60.0, Some(1310.0), 1.0, 0.0)),
        (t1, day(1, 8), episode(tv, 55.0, 60.0, 42.0, 58.0, Some(1250.0), 3.5, 0.1)),
        (t1, day(2, 8), episode(tv, 60.0, 65.0, 45.0, 55.0, Some(1400.0), 2.0, 0.05)),
        (t1, day(3, 8), episode(met, 65.0, 62.0, 48.0, 48.0, Some(700.0), 0.5, 0.0)),
        (t1, w46 + HOUR_MS, episode(met, 50.0, 52.0, 40.0, 60.0, Some(500.0), 0.0, 0.0)),
        (t1, w46 + 30 * HOUR_MS, episode(met, 52.0, 50.0, 41.0, 41.0, Some(600.0), 0.0, 0.0)),
        (t2, day(1, 14), episode(av, 50.0, 70.0, 72.0, 28.0, Some(900.0), 0.0, 0.6)),
        (t2, day(3, 14), episode(av, 50.0, 70.0, 72.0, 28.0, Some(950.0), 0.0, 0.6)),
        (t2, day(5, 14), episode(av, 50.0, 70.0, 72.0, 28.0, Some(1_010.0), 0.0, 0.6)),
        (f1, day(2, 9), episode(inc, 10.0, 12.0, 30.0, 70.0, Some(95.0), 0.0, 0.0)),
        (f1, day(4, 9), episode(inc, 12.0, 10.0, 35.0, 35.0, None, 0.0, 0.0)),
    ];
    for (tag, at, e) in &finals {
        store
            .upsert_episode(tag, e, *at, at + 3_000_000, true, *at)
            .await
            .unwrap();
    }
    // An episode still open at generation time: shown as such, not counted.
    let open = episode(inc, 62.0, 64.0, 47.0, 53.0, None, 0.0, 0.0);
    store
        .upsert_episode(t1, &open, day(6, 20), day(6, 21), false, 0)
        .await
        .unwrap();
    store
        .insert_model(t1, &model(0.50, 560.0, 35.0), W48_MS - 3 * WEEK_MS)
        .await
        .unwrap();
    store
        .insert_model(t1, &model(0.55, 600.0, 37.0), day(3, 12))
        .await
        .unwrap();
    store
        .insert_model(t2, &model(0.8, 300.0, 30.0), W48_MS - WEEK_MS)
        .await
        .unwrap();

    // Samples behind the two telling changes, and a level loop with a gap.
    simulated_change(
        &store,
        "TIC-102",
        day(5, 14),
        Process {
            gain: 0.8,
            time_constant_s: 300.0,
            second_time_constant_s: 0.0,
            dead_time_s: 30.0,
            bias: 50.0 - 0.8 * 72.0,
        },
        PiController {
            gain: 8.0,
            integral_time_s: 300.0,
            op_min: 0.0,
            op_max: 100.0,
        },
        50.0,
        70.0,
    )
    .await;
    simulated_change(
        &store,
        "TIC-101",
        day(2, 8),
        Process {
            gain: 0.55,
            time_constant_s: 600.0,
            second_time_constant_s: 0.0,
            dead_time_s: 37.0,
            bias: 60.0 - 0.55 * 45.0,
        },
        PiController {
            gain: 1.5,
            integral_time_s: 1_500.0,
            op_min: 0.0,
            op_max: 100.0,
        },
        60.0,
        65.0,
    )
    .await;
    let lic: Arc<str> = Arc::from("LIC-301");
    let mut level = Vec::new();
    for k in 0..600_i64 {
        // Every 10 s for 100 minutes, except a 30-minute silence after the first 20 minutes.
        if (120..300).contains(&k) {
            continue;
        }
        for signal in [Signal::Sp, Signal::Pv, Signal::Op] {
            level.push(Sample {
                loop_tag: lic.clone(),
                signal,
                ts_ms: day(4, 0) + k * 10_000,
                value: 40.0,
            });
        }
    }
    store.insert_samples(&level).await.unwrap();
    // The daemon records the silence as a gap of each signal when the samples come back.
    let silence: Vec<GapRow> = [Signal::Sp, Signal::Pv, Signal::Op]
        .into_iter()
        .map(|signal| GapRow {
            loop_tag: "LIC-301".into(),
            signal,
            from_ms: day(4, 0) + 119 * 10_000,
            to_ms: day(4, 0) + 300 * 10_000,
        })
        .collect();
    store.record_gaps(&silence).await.unwrap();
    store
        .raise_alert(AlertInput {
            loop_tag: "LIC-301".into(),
            kind: "stale_tag".into(),
            message:
                "LIC-301: no pv sample for more than the expected period times the stale limit"
                    .into(),
            evidence: serde_json::json!({}),
            seen_ms: day(4, 1),
            since_ms: None,
            change_start_ms: None,
        })
        .await
        .unwrap();
    store
        .raise_alert(AlertInput {
            loop_tag: "TIC-101".into(),
            kind: "tuning_limited".into(),
            message: "settled in 1400 s, spec 900 s".into(),
            evidence: serde_json::json!({}),
            seen_ms: day(2, 9),
            since_ms: None,
            change_start_ms: None,
        })
        .await
        .unwrap();
    store
}

pub(crate) struct Fixture {
    pub(crate) dir: tempfile::TempDir,
    pub(crate) db: PathBuf,
    pub(crate) config: PathBuf,
}

pub(crate) async fn fixture() -> Fixture {
    let dir = tempfile::tempdir().unwrap();
    let db = dir.path().join("headroom.db");
    let config = dir.path().join("headroom.toml");
    std::fs::write(&config, CONFIG).unwrap();
    seeded_store(&db).await.close().await;
    Fixture { dir, db, config }
}

pub(crate) fn report(args: &[&str]) -> (i32, String, String) {
    run_headroom_text(&[&["report"], args].concat())
}

/// One week's summary printed in one format, with the configuration and the store given.
pub(crate) fn week_report(
    config: &Path,
    db: &Path,
    week: &str,
    format: &str,
) -> (i32, String, String) {
    report(&[
        "--config",
        config.to_str().unwrap(),
        "--db",
        db.to_str().unwrap(),
        "--week",
        week,
        "--format",
        format,
    ])
}

/// Writes the W48 summary in all three formats into a folder that does not exist yet (the
/// command makes it, with its parents); returns the folder.
pub(crate) fn write_all(f: &Fixture) -> PathBuf {
    let out = f.dir.path().join("out").join("weekly");
    assert!(!out.exists());
    let (code, stdout, stderr) = report(&[
        "--config",
        f.config.to_str().unwrap(),
        "--db",
        f.db.to_str().unwrap(),
        "--week",
        "2026-W48",
        "--format",
        "html,md,json",
        "--out",
        out.to_str().unwrap(),
    ]);
    assert_eq!(code, 0, "stdout: {stdout}\nstderr: {stderr}");
    assert!(stdout.contains("loop-health-2026-W48.html"), "{stdout}");
    out
}

/// The HTML's text with the template's escapes undone (`/` is written `&#x2f;`), for searching.
pub(crate) fn unescaped(html: &str) -> String {
    html.replace("&#x2f;", "/")
        .replace("&#x27;", "'")
        .replace("&quot;", "\"")
        .replace("&lt;", "<")
        .replace("&gt;", ">")
        .replace("&amp;", "&")
}

pub(crate) fn loop_json<'a>(j: &'a serde_json::Value, tag: &str) -> &'a serde_json::Value {
    j["loops"]
        .as_array()
        .unwrap()
        .iter()
        .find(|l| l["tag"] == tag)
        .unwrap_or_else(|| panic!("no loop {tag} in the JSON"))
}

fn close(a: f64, b: f64, tol: f64) -> bool {
    (a - b).abs() <= tol
}

#[tokio::test]
async fn the_summary_of_a_seeded_week_has_the_expected_numbers_in_every_format() {
    let f = fixture().await;
    let out = write_all(&f);
    let json: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string(out.join("loop-health-2026-W48.json")).unwrap(),
    )
    .unwrap();
    let md = std::fs::read_to_string(out.join("loop-health-2026-W48.md")).unwrap();
    let html = unescaped(&std::fs::read_to_string(out.join("loop-health-2026-W48.html")).unwrap());

    assert_eq!(json["period"]["label"], "2026-W48");
    assert_eq!(json["schema_version"], 3);
    assert_eq!(json["version"], env!("CARGO_PKG_VERSION"));
    assert_eq!(json["period"]["from"], "2026-11-23T00:00:00+00:00");
    assert_eq!(json["plant"]["loops"], 4);
    // 4 + 3 + 2 final changes this week; the provisional one is not counted.
    assert_eq!(json["plant"]["changes"], 9);

    // TIC-101: settling of the judged changes 700, 1250, 1310, 1400 s → median (1250 + 1310) / 2.
    let tic = loop_json(&json, "TIC-101");
    let s = &tic["stats"];
    assert_eq!(s["changes"], 4);
    assert_eq!(s["judged"], 4);
    assert_eq!(s["counts"]["met"], 1);
    assert_eq!(s["counts"]["tuning_limited"], 3);
    assert_eq!(s["met_share"], 0.25);
    assert_eq!(s["median_settling_s"], 1280.0);
    assert_eq!(s["worst_settling_s"], 1400.0);
    assert_eq!(s["worst_overshoot_pct"], 3.5);
    // Mean of 0, 0.1, 0.05, 0.
    assert!(close(s["saturation_duty"].as_f64().unwrap(), 0.0375, 1e-12));
    assert_eq!(tic["provisional"], 1);
    assert_eq!(tic["status"], "retune");
    // The model changed against the one in force when the eight weeks began: 0.50 → 0.55 is
    // +10 %, 560 → 600 s is +7.14 %, 35 → 37 s is +5.71 %.
    let change = &tic["model"]["change"];
    assert!(close(change["gain_pct"].as_f64().unwrap(), 10.0, 1e-9));
    assert!(close(
        change["time_constant_pct"].as_f64().unwrap(),
        100.0 * 40.0 / 560.0,
        1e-9
    ));
    assert!(close(
        change["dead_time_pct"].as_f64().unwrap(),
        100.0 * 2.0 / 35.0,
        1e-9
    ));
    // SIMC PI (Skogestad 2003): Kc = τ / (K (τc + θ)), τI = min(τ, 4 (τc + θ)); τc is chosen
    // for the spec with the maximum sensitivity Ms at most 2 (Åström & Hägglund's usual limit).
    let pi = &tic["recommendation"]["retune"];
    let tau_c = pi["closed_loop_time_constant_s"].as_f64().unwrap();
    assert!(tau_c > 0.0, "{pi}");
    assert!(
        pi["verified"]["max_sensitivity"].as_f64().unwrap() <= 2.0,
        "{pi}"
    );
    assert!(close(
        pi["ideal"]["gain"].as_f64().unwrap(),
        600.0 / (0.55 * (tau_c + 37.0)),
        1e-9
    ));
    assert!(close(
        pi["ideal"]["integral_time_s"].as_f64().unwrap(),
        600.0_f64.min(4.0 * (tau_c + 37.0)),
        1e-9
    ));
    assert_eq!(tic["recommendation"]["action"], "retune");
    let caution = tic["recommendation"]["caution"].as_str().unwrap();
    assert!(caution.contains("qualified engineers"), "{caution}");
    // The eight-week trend: W46 had two met changes (500 and 600 s → median 550 s).
    let trend = tic["trend"].as_array().unwrap();
    assert_eq!(trend.len(), 8);
    assert_eq!(trend[0]["label"], "2026-W41");
    assert_eq!(trend[5]["label"], "2026-W46");
    assert_eq!(trend[5]["met_share"], 1.0);
    assert_eq!(trend[5]["median_settling_s"], 550.0);
    assert_eq!(trend[4]["changes"], 0);
    assert_eq!(trend[4]["gain"], 0.5);
    assert_eq!(trend[7]["gain"], 0.55);

    // TIC-102: +20 from OP 72 on K 0.8, τ 300 s, θ 30 s, band 2 %, spec 600 s. From the design's
    // t* formula, the reach R that makes t* = 600 s is R = 0.98·20 / (1 − e^(−(600 − 30)/300)),
    // so the OP limit needed is 72 + R/0.8 and the capacity ratio (limit − 0)/(100 − 0). Today's
    // headroom 28 reaches 0.8·28 = 22.4, so the largest change meeting the spec is
    // 22.4·(1 − e^(−570/300))/0.98.
    let k: f64 = 0.8;
    let decay = (-(600.0_f64 - 30.0) / 300.0).exp();
    let reach = 0.98 * 20.0 / (1.0 - decay);
    let limit = 72.0 + reach / k;
    let largest = k * 28.0 * (1.0 - decay) / 0.98;
    let tic2 = loop_json(&json, "TIC-102");
    assert_eq!(tic2["status"], "upgrade");
    let a = &tic2["recommendation"]["actuator"];
    assert!(
        close(a["required_op_limit"].as_f64().unwrap(), limit, 1e-6),
        "{a}"
    );
    assert!(
        close(a["capacity_ratio"].as_f64().unwrap(), limit / 100.0, 1e-8),
        "{a}"
    );
    assert!(
        close(a["largest_compliant_step"].as_f64().unwrap(), largest, 1e-6),
        "{a}"
    );
    // t* for the typical change itself: θ + τ ln(R / (R − 0.98·20)) with R = 22.4.
    let t_star = 30.0 + 300.0 * (22.4_f64 / (22.4 - 19.6)).ln();
    assert!(
        close(a["fastest_settling_time_s"].as_f64().unwrap(), t_star, 1e-6),
        "{a}"
    );
    assert_eq!(tic2["stats"]["median_settling_s"], 950.0);
    assert_eq!(tic2["telling"]["start"], "2026-11-28T14:00:00+00:00");

    // The ranking: the actuator problem first, the retune second, the loops without a verdict
    // after them, in that order of urgency.
    let ranking: Vec<&str> = json["plant"]["ranking"]
        .as_array()
        .unwrap()
        .iter()
        .map(|r| r["tag"].as_str().unwrap())
        .collect();
    assert_eq!(ranking, ["TIC-102", "TIC-101", "FIC-201", "LIC-301"]);
    let alerts = json["plant"]["open_alerts"].as_array().unwrap();
    assert_eq!(alerts.len(), 2);
    assert_eq!(alerts[0]["kind"], "stale_tag");
    assert_eq!(alerts[0]["count"], 1);
    let quality = json["plant"]["data_quality"].to_string();
    assert!(quality.contains("LIC-301: stale tag"), "{quality}");
    // The level loop's 30-minute silence (threshold 10 × 10 s): the gap runs from the 119th
    // to the 300th sample, 181 × 10 s = 1,810 s = 30.2 min.
    assert!(
        quality.contains("LIC-301 OP, PV, SP: 1 gap longer than 100.0 s, 30.2 min in all"),
        "{quality}"
    );

    // The same numbers in the Markdown and the HTML, each with its unit to three significant
    // figures (1280 s = 21.3 min, 1400 s = 23.3 min; the OP's unit defaults to %, Kc is in OP
    // units per PV unit).
    use headroom::units::quantity;
    for (name, text) in [("md", &md), ("html", &html)] {
        for expected in [
            "21.3 min",
            "23.3 min",
            "25.0 %",
            "3.50 %",
            &quantity(limit, "%"),
            &format!("{}×", headroom::units::sig(limit / 100.0, 3)),
            &quantity(largest, "°C"),
            &quantity(pi["ideal"]["gain"].as_f64().unwrap(), "%/°C"),
            "+10.0 %",
            "qualified engineers",
            "upgrade the actuator",
            "retune",
        ] {
            assert!(text.contains(expected), "{name} lacks {expected:?}");
        }
        // The clear lines of the odd loops.
        assert!(
            text.contains("No setpoint changes were scored this period"),
            "{name}"
        );
        assert!(
            text.contains("No usable process model has been identified"),
            "{name}"
        );
    }
    assert!(
        md.contains("| median settling time | 21.3 min | spec 15.0 min |"),
        "{md}"
    );
}

/// Checks the HTML with an HTML5 parser (html5ever, the parser of a browser engine) and every
/// inline SVG with an XML parser. Returns the number of SVGs.
pub(crate) fn check_html(html: &str) -> usize {
    use html5ever::tendril::TendrilSink;
    let dom = html5ever::parse_document(markup5ever_rcdom::RcDom::default(), Default::default())
        .one(html);
    let errors = dom.errors.borrow();
    assert!(errors.is_empty(), "HTML parse errors: {errors:?}");
    assert!(
        !html.contains("<script"),
        "the summary must not carry scripts"
    );
    for needle in ["src=\"http", "href=\"http", "@import", "url(http"] {
        assert!(
            !html.contains(needle),
            "the summary fetches something: {needle}"
        );
    }
    let mut count = 0;
    let mut rest = html;
    while let Some(start) = rest.find("<svg") {
        let end = rest[start..]
            .find("</svg>")
            .expect("an <svg> without </svg>")
            + start
            + 6;
        let svg = &rest[start..end];
        roxmltree::Document::parse(svg).unwrap_or_else(|e| panic!("SVG {count} is not XML: {e}"));
        count += 1;
        rest = &rest[end..];
    }
    count
}

#[tokio::test]
async fn the_html_parses_its_svgs_are_xml_and_a_headless_browser_draws_it() {
    let f = fixture().await;
    let out = write_all(&f);
    let path = out.join("loop-health-2026-W48.html");
    let html = std::fs::read_to_string(&path).unwrap();
    // Two loops with a telling change and a trend each (TIC-101, TIC-102); FIC-201 judged
    // nothing, so it has no trend to draw. No loop has a load disturbance to plot: the tail of
    // TIC-102's last response (settled in the spec band, still outside the narrower hold band)
    // is not a load.
    assert_eq!(check_html(&html), 4);

    let browser = find_browser().unwrap_or_else(|| {
        panic!(
            "no headless browser found: this test renders the summary in Debian's chromium. \
             Install it with `apt-get install -y chromium` (tests/run and .ci/run do this when \
             run as root), or point HEADROOM_CHROMIUM at a chromium binary."
        )
    });
    let png_path = f.dir.path().join("summary.png");
    let profile = f.dir.path().join("chromium-profile");
    let (w, h) = (1000_u32, 2400_u32);
    let status = Command::new(&browser)
        .args([
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--hide-scrollbars",
            "--no-first-run",
            &format!("--user-data-dir={}", profile.display()),
            &format!("--screenshot={}", png_path.display()),
            &format!("--window-size={w},{h}"),
            &format!("file://{}", path.display()),
        ])
        .output()
        .unwrap();
    assert!(
        png_path.exists(),
        "{} wrote no screenshot: {}",
        browser.display(),
        String::from_utf8_lossy(&status.stderr)
    );
    let decoder = png::Decoder::new(std::io::BufReader::new(
        std::fs::File::open(&png_path).unwrap(),
    ));
    let mut reader = decoder.read_info().unwrap();
    let mut buf = vec![0; reader.output_buffer_size().unwrap()];
    let info = reader.next_frame(&mut buf).unwrap();
    assert_eq!((info.width, info.height), (w, h), "screenshot size");
    let channels = info.color_type.samples();
    let pixels: Vec<&[u8]> = buf[..info.buffer_size()].chunks(channels).collect();
    let white = |p: &[u8]| p[..3].iter().all(|c| *c > 245);
    let inked = pixels.iter().filter(|p| !white(p)).count() as f64 / pixels.len() as f64;
    let mut colours: Vec<[u8; 3]> = pixels.iter().map(|p| [p[0], p[1], p[2]]).collect();
    colours.sort_unstable();
    colours.dedup();
    // Text, tables and plots: far from a blank page, yet mostly paper.
    assert!(
        inked > 0.03 && inked < 0.6,
        "share of non-white pixels {inked:.3}"
    );
    assert!(
        colours.len() > 50,
        "only {} distinct colours",
        colours.len()
    );
}

/// Debian's chromium (or HEADROOM_CHROMIUM).
fn find_browser() -> Option<PathBuf> {
    if let Some(p) = std::env::var_os("HEADROOM_CHROMIUM") {
        return Some(PathBuf::from(p));
    }
    ["/usr/bin/chromium", "/usr/bin/chromium-browser"]
        .into_iter()
        .map(PathBuf::from)
        .find(|p| p.exists())
}

#[tokio::test]
async fn an_empty_week_gives_clear_lines_not_an_empty_page() {
    let f = fixture().await;
    for format in ["json", "md", "html"] {
        let (code, out, err) = week_report(&f.config, &f.db, "2026-W30", format);
        assert_eq!(code, 0, "{err}");
        match format {
            "json" => {
                let j: serde_json::Value = serde_json::from_str(&out).unwrap();
                assert_eq!(j["plant"]["changes"], 0);
                assert_eq!(j["loops"].as_array().unwrap().len(), 4);
                assert!(
                    j["loops"]
                        .as_array()
                        .unwrap()
                        .iter()
                        .all(|l| l["status"] == "no_changes")
                );
            }
            "html" => {
                check_html(&out);
                assert!(out.contains("No setpoint changes were scored this period"));
                assert!(out.contains("No stored samples") || !out.contains("<figure>"));
            }
            _ => assert!(
                out.contains("No setpoint changes were scored this period"),
                "{out}"
            ),
        }
    }
    // A store with nothing at all, and no configuration.
    let empty = f.dir.path().join("empty.db");
    Store::open(&empty).await.unwrap().close().await;
    let (code, out, err) = report(&["--db", empty.to_str().unwrap(), "--format", "md"]);
    assert_eq!(code, 0, "{err}");
    assert!(out.contains("No loops for this period"), "{out}");
    assert!(out.contains("No configuration was given"), "{out}");
}

#[tokio::test]
async fn mistakes_on_the_command_line_are_usage_errors() {
    let f = fixture().await;
    let db = f.db.to_str().unwrap();
    let (code, _, err) = report(&["--db", db, "--week", "2026-48"]);
    assert_eq!(code, 2);
    assert!(err.contains("2026-W48"), "{err}");
    let (code, _, err) = report(&["--db", db, "--format", "html,md"]);
    assert_eq!(code, 2);
    assert!(err.contains("--out"), "{err}");
    let (code, _, err) = report(&["--db", db, "--time-zone", "Nowhere/Special"]);
    assert_eq!(code, 2);
    assert!(err.contains("unknown time zone"), "{err}");
    let (code, _, err) = report(&["--week", "2026-W48"]);
    assert_eq!(code, 2);
    assert!(err.contains("--db FILE or --config FILE"), "{err}");
    // A file where the output folder should be.
    let file = f.dir.path().join("a-file");
    std::fs::write(&file, "").unwrap();
    let (code, _, err) = report(&["--db", db, "--out", file.to_str().unwrap()]);
    assert_eq!(code, 2);
    assert!(err.contains("is not a folder"), "{err}");
}

//! The retune advice: PI settings chosen and verified on the identified model by
//! [`tuning::retune`] for the loop's typical tuning-limited change, written in the loop's own
//! controller form and units with the action in words, beside today's settings and what they
//! do on the same model.

use super::{Basis, median};
use crate::analysis::controller::{self, Action as ControlAction, Convention, Ideal, Written};
use crate::analysis::identify::Model;
use crate::analysis::tuning::{self, Suggestion, Target, Verified};
use crate::analysis::verdict::{EpisodeResult, Verdict};
use crate::units::{DISPLAY_DIGITS, human_duration, quantity, sig, signed_quantity};
use serde::Serialize;

/// Whether the suggestion meets the spec, and if not, why no PI is offered as meeting it.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Outcome {
    /// Settings that meet the spec on the model with Ms ≤ 2, no slower than today.
    MeetsSpec,
    /// Meeting the spec needs Ms above 2: refused; the settings given are the best safe ones.
    NeedsHighMs,
    /// No PI on the model meets the spec: the settings given are the best safe ones.
    NoPiMeetsSpec,
}

/// The retune advice (JSON: `recommendation.retune`).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Retune {
    pub outcome: Outcome,
    /// Why no PI is offered as meeting the spec, for a refusal.
    pub reason: Option<String>,
    /// The settings in the canonical ideal form: Kc in OP units per PV unit, signed like the
    /// process gain; Td = 0 (a PI).
    pub ideal: Ideal,
    /// The controller action the process needs, in words.
    pub action: ControlAction,
    /// SIMC's closed-loop time constant τc that gave the settings.
    pub closed_loop_time_constant_s: f64,
    /// The same settings as the loop's controller takes them (the canonical convention when
    /// the loop does not describe its controller); `None` when they cannot be written so.
    pub settings: Option<Written>,
    /// Why the settings could not be written in the controller's convention.
    pub settings_problem: Option<String>,
    /// The settings simulated on the identified model, OP clamped, for the typical change.
    pub verified: Verified,
    /// Today's settings, when the loop gives them, with their response on the same model.
    pub current: Option<Current>,
    /// Whether the loop describes its controller.
    pub controller_described: bool,
}

/// Today's settings and what they do on the model.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Current {
    pub ideal: Ideal,
    pub settings: Written,
    pub verified: Verified,
}

/// No PI setting on the model is both safe (Ms ≤ 2) and no slower than today.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("{reason}")]
pub(super) struct NoSafeSetting {
    reason: String,
}

/// The advice for the typical tuning-limited change; an error with the reason when no setting
/// is safe at all.
pub(super) fn advise(
    episodes: &[EpisodeResult],
    model: &Model,
    b: &Basis,
) -> Result<Retune, NoSafeSetting> {
    let setup = b.setup;
    let (step, u0) = super::typical(episodes, |v| v == Verdict::TuningLimited);
    let settled: Vec<f64> = episodes
        .iter()
        .filter(|e| e.verdict == Verdict::TuningLimited)
        .filter(|e| (e.sp_to - e.sp_from).signum() == step.signum())
        .filter_map(|e| e.settling_time_s)
        .collect();
    let target = Target {
        step,
        from_op: u0,
        op: setup.op,
        band: setup.spec.band_abs(step),
        spec_s: setup.spec.settle_within_s,
        max_overshoot_pct: setup.spec.max_overshoot_pct,
        achieved_settling_s: (!settled.is_empty()).then(|| median(settled.into_iter())),
    };
    let suggestion = tuning::retune(model, &target, b.sample_s);
    let Some(chosen) = suggestion.settings() else {
        return Err(NoSafeSetting {
            reason: match suggestion {
                Suggestion::NeedsMs { reason, .. } | Suggestion::NoPi { reason, .. } => reason,
                Suggestion::Meets { .. } => unreachable!("a suggestion that meets has settings"),
            },
        });
    };
    let (outcome, reason) = match &suggestion {
        Suggestion::Meets { .. } => (Outcome::MeetsSpec, None),
        Suggestion::NeedsMs { reason, .. } => (Outcome::NeedsHighMs, Some(reason.clone())),
        Suggestion::NoPi { reason, .. } => (Outcome::NoPiMeetsSpec, Some(reason.clone())),
    };
    let described = setup.controller;
    let convention = described.map_or(Convention::CANONICAL, |c| c.convention());
    let spans = described.and_then(|c| c.spans(setup.op.span()));
    let (settings, settings_problem) = match controller::write(chosen.ideal, convention, spans) {
        Ok(w) => (Some(w), None),
        Err(e) => (None, Some(e.to_string())),
    };
    let current = described
        .and_then(|c| c.current(setup.op.span(), model.gain))
        .and_then(Result::ok)
        .and_then(|ideal| {
            let settings = controller::write(ideal, convention, spans).ok()?;
            Some(Current {
                ideal,
                settings,
                verified: tuning::verify(model, &ideal, &target, b.sample_s),
            })
        });
    Ok(Retune {
        outcome,
        reason,
        ideal: chosen.ideal,
        action: ControlAction::for_process_gain(model.gain),
        closed_loop_time_constant_s: chosen.tau_c_s,
        settings,
        settings_problem,
        verified: chosen.verified,
        current,
        controller_described: described.is_some(),
    })
}

/// The verified response in words: `settles in 6.9 min, overshoot 3.2 %, Ms 1.45`.
fn response_words(v: &Verified) -> String {
    format!(
        "{}, overshoot {}, Ms {}",
        v.settling_time_s
            .map_or("does not settle".to_string(), |t| format!(
                "settles in {}",
                human_duration(t)
            )),
        quantity(v.overshoot_pct, "%"),
        sig(v.max_sensitivity, DISPLAY_DIGITS)
    )
}

/// The sentence of the summary: what was found and what the suggestion does on the model.
pub(super) fn summary(r: &Retune, b: &Basis) -> String {
    let (spec, u) = (&b.setup.spec, &b.setup.units);
    let v = &r.verified;
    let limits = format!(
        "spec {}{}",
        human_duration(spec.settle_within_s),
        spec.max_overshoot_pct.map_or(String::new(), |o| format!(
            ", overshoot at most {}",
            quantity(o, "%")
        ))
    );
    let change = format!(
        "a typical {} change from OP {}",
        signed_quantity(v.step, &u.pv),
        quantity(v.from_op, &u.op)
    );
    match r.outcome {
        Outcome::MeetsSpec => format!(
            "{} of {} conclusive changes missed the spec although the actuator had room. \
             Suggested PI settings (SIMC), verified on the model for {change}: {} ({limits}).",
            b.tally.c.tuning_limited,
            b.tally.conclusive,
            response_words(v)
        ),
        Outcome::NeedsHighMs | Outcome::NoPiMeetsSpec => format!(
            "{} of {} conclusive changes missed the spec although the actuator had room, but \
             no PI setting can be offered as meeting it: {} The best safe PI settings, verified \
             on the model for {change}: {} ({limits}). Renegotiate the spec to about that, or \
             look beyond PI control.",
            b.tally.c.tuning_limited,
            b.tally.conclusive,
            r.reason.as_deref().unwrap_or(""),
            response_words(v)
        ),
    }
}

/// The settings as people type them, one line each.
pub(super) fn lines(r: &Retune, units: &crate::analysis::Units) -> Vec<String> {
    let mut out = Vec::new();
    let heading = match r.outcome {
        Outcome::MeetsSpec => "Suggested settings",
        Outcome::NeedsHighMs | Outcome::NoPiMeetsSpec => "Best safe settings",
    };
    match &r.settings {
        Some(w) => out.push(format!("{heading}: {}.", w.words(units))),
        None => out.push(format!(
            "{heading} cannot be written in the controller's form ({}).",
            r.settings_problem.as_deref().unwrap_or("no equivalent")
        )),
    }
    if let Some(c) = &r.current {
        out.push(format!(
            "Today's settings: {}; on the model: {}.",
            c.settings.words(units),
            response_words(&c.verified)
        ));
    }
    if !r.controller_described {
        out.push(
            "The controller's form and units are not described, so the settings are in the \
             ideal form with the gain in OP units per PV unit and times in seconds; describe \
             the controller (form, units, PV range, today's settings) to get them in its own."
                .to_string(),
        );
    }
    out
}

/// The advice's figures with labels, for tables (the weekly summary).
pub fn figures(r: &Retune, units: &crate::analysis::Units) -> Vec<(&'static str, String)> {
    let mut out = vec![(
        match r.outcome {
            Outcome::MeetsSpec => "Suggested settings (SIMC PI, verified on the model)",
            Outcome::NeedsHighMs | Outcome::NoPiMeetsSpec => {
                "Best safe settings (no PI meets the spec)"
            }
        },
        r.settings.map_or_else(
            || {
                format!(
                    "cannot be written in the controller's form: {}",
                    r.settings_problem.as_deref().unwrap_or("no equivalent")
                )
            },
            |w| w.words(units),
        ),
    )];
    out.push((
        "Their response on the model",
        format!(
            "{} for a {} change from OP {}",
            response_words(&r.verified),
            signed_quantity(r.verified.step, &units.pv),
            quantity(r.verified.from_op, &units.op)
        ),
    ));
    if let Some(c) = &r.current {
        out.push(("Today's settings", c.settings.words(units)));
        out.push(("Today's response on the model", response_words(&c.verified)));
    }
    out.push((
        "Closed-loop time constant τc chosen",
        human_duration(r.closed_loop_time_constant_s),
    ));
    if let Some(why) = &r.reason {
        out.push(("Why no PI meets the spec", why.clone()));
    }
    out
}

/// A warning when the controller's configured action is not the one the process needs.
pub(super) fn action_warning(r: &Retune, b: &Basis) -> Option<String> {
    let configured = b.setup.controller?.action?;
    (configured != r.action).then(|| {
        format!(
            "The controller is described as {} acting, but the identified process gain is {}, \
             which needs {} action: check the action before anything else.",
            configured.as_str(),
            if r.ideal.gain < 0.0 {
                "negative"
            } else {
                "positive"
            },
            r.action.as_str()
        )
    })
}

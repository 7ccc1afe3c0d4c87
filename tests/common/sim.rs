//! Simulated loop runs as the tests feed them on: as a series for the analysis core, as the
//! setup the core judges them with, and as samples for the store.

use headroom::analysis::sim::{PiController, SimSample};
use headroom::analysis::{AnalysisOptions, LoopSetup, OpRange, Spec};
use headroom::sample::{Sample, Signal};
use std::sync::Arc;

pub use headroom::analysis::sim::series;

/// The setup of a simulated loop: its controller's OP range, `spec` and the default options.
pub fn setup(tag: &str, controller: &PiController, spec: Spec) -> LoopSetup {
    LoopSetup {
        units: headroom::analysis::Units::default(),
        controller: None,
        actuator: None,
        tag: tag.into(),
        op: OpRange {
            min: controller.op_min,
            max: controller.op_max,
        },
        spec,
        options: AnalysisOptions::default(),
    }
}

/// The store samples (sp, pv and op at each time) of a simulated run, the sample at simulated
/// time `s` stamped `ts_ms(s)`.
pub fn store_samples(
    tag: &str,
    samples: &[SimSample],
    ts_ms: impl Fn(&SimSample) -> i64,
) -> Vec<Sample> {
    let tag: Arc<str> = Arc::from(tag);
    let mut out = Vec::with_capacity(samples.len() * 3);
    for r in samples {
        let ts_ms = ts_ms(r);
        for (signal, value) in [(Signal::Sp, r.sp), (Signal::Pv, r.pv), (Signal::Op, r.op)] {
            out.push(Sample {
                loop_tag: tag.clone(),
                signal,
                ts_ms,
                value,
            });
        }
    }
    out
}

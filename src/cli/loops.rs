//! `headroom loops`: each loop's status from the store.

use super::Failure;
use super::store::{StoreArgs, open_read_only, write_json};
use crate::units::rfc3339;
use std::io::Write;

pub async fn loops(args: &StoreArgs, out: &mut dyn Write) -> Result<(), Failure> {
    let store = open_read_only(args).await?;
    let rows = store.loops_overview().await?;
    if args.json {
        return write_json(&rows, out);
    }
    if rows.is_empty() {
        writeln!(out, "The store holds no loops yet.")?;
    }
    for r in rows {
        writeln!(out, "{}", r.loop_tag)?;
        let last: Vec<String> = r
            .last_sample_ms
            .iter()
            .map(|(s, t)| format!("{s} {}", rfc3339(*t)))
            .collect();
        writeln!(
            out,
            "  last samples: {}",
            if last.is_empty() {
                "none".into()
            } else {
                last.join(", ")
            }
        )?;
        match &r.last_episode {
            Some(e) => writeln!(
                out,
                "  last change:  {} {} → {}  {}{}",
                rfc3339(e.start_ms),
                e.detail["sp_from"],
                e.detail["sp_to"],
                e.verdict.as_str(),
                if e.is_final { "" } else { " (still open)" }
            )?,
            None => writeln!(out, "  last change:  none scored yet")?,
        }
        match &r.latest_model {
            Some(m) => writeln!(
                out,
                "  model:        gain {:.4}, time constant {:.1} s, dead time {:.1} s (fit {:.1} %)",
                m.gain,
                m.time_constant_s,
                m.dead_time_s,
                100.0 * m.fit_r2
            )?,
            None => writeln!(out, "  model:        none yet")?,
        }
        writeln!(out, "  alerts not acknowledged: {}", r.open_alerts)?;
    }
    Ok(())
}

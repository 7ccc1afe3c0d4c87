//! The commands that read the store: `loops`, `episodes`, `alerts`, `export`. They open the
//! store read-only (except `alerts --ack`) and print for people or, with `--json`, for programs.

use crate::cli::{AlertsArgs, EpisodesArgs, ExportArgs, StoreArgs, UsageError};
use crate::config::Config;
use crate::store::Store;
use crate::units::rfc3339;
use anyhow::Context;
use std::io::Write;
use std::path::PathBuf;

/// The store file named by `--db` or by the config's store path.
pub fn store_path(args: &StoreArgs) -> anyhow::Result<PathBuf> {
    match (&args.db, &args.config) {
        (Some(db), _) => Ok(db.clone()),
        (None, Some(cfg)) => {
            let c = Config::load(cfg).map_err(|e| UsageError(e.to_string()))?;
            Ok(c.store_path(cfg))
        }
        (None, None) => {
            Err(UsageError("say where the store is: --db FILE or --config FILE".into()).into())
        }
    }
}

async fn open(args: &StoreArgs) -> anyhow::Result<Store> {
    let path = store_path(args)?;
    Store::open_read_only(&path)
        .await
        .map_err(|e| UsageError(e.to_string()).into())
}

/// Parses RFC 3339, or an age (`90m`, `24h`, `7d`, `30s`) counted back from now, into epoch ms.
pub fn parse_time(s: &str) -> anyhow::Result<i64> {
    if let Ok(t) = s.parse::<jiff::Timestamp>() {
        return Ok(t.as_millisecond());
    }
    let (num, unit) = s.split_at(s.len().saturating_sub(1));
    let factor = match unit {
        "s" => 1_000.0,
        "m" => 60_000.0,
        "h" => 3_600_000.0,
        "d" => 86_400_000.0,
        _ => f64::NAN,
    };
    match num.parse::<f64>() {
        Ok(n) if factor.is_finite() && n >= 0.0 => {
            Ok(jiff::Timestamp::now().as_millisecond() - (n * factor) as i64)
        }
        _ => Err(UsageError(format!(
            "cannot read the time {s:?}: give RFC 3339 (2026-11-23T08:00:00Z) or an age such as 90m, 24h, 7d"
        ))
        .into()),
    }
}

pub async fn loops(args: &StoreArgs, out: &mut dyn Write) -> anyhow::Result<()> {
    let store = open(args).await?;
    let rows = store.loops_overview().await?;
    if args.json {
        serde_json::to_writer_pretty(&mut *out, &rows)?;
        writeln!(out)?;
        return Ok(());
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
        writeln!(out, "  open alerts:  {}", r.open_alerts)?;
    }
    Ok(())
}

pub async fn episodes(args: &EpisodesArgs, out: &mut dyn Write) -> anyhow::Result<()> {
    let since = args.since.as_deref().map(parse_time).transpose()?;
    let store = open(&args.store).await?;
    let rows = store.episodes(args.loop_tag.as_deref(), since).await?;
    if args.store.json {
        // The same fields as `analyze --json` per episode, plus loop, absolute start and state.
        let list: Vec<serde_json::Value> = rows
            .iter()
            .map(|r| {
                let mut v = r.detail.clone();
                v["loop"] = r.loop_tag.clone().into();
                v["start_time"] = rfc3339(r.start_ms).into();
                v["final"] = r.is_final.into();
                v
            })
            .collect();
        serde_json::to_writer_pretty(&mut *out, &list)?;
        writeln!(out)?;
        return Ok(());
    }
    if rows.is_empty() {
        writeln!(out, "No scored setpoint changes match.")?;
        return Ok(());
    }
    writeln!(
        out,
        "{:<12} {:<24} {:>18} {:>9} {:>9} {:>9}  verdict",
        "loop", "start", "SP from → to", "settled", "overshoot", "fastest"
    )?;
    for r in rows {
        let d = &r.detail;
        let secs = |k: &str| {
            d[k].as_f64()
                .map_or("—".to_string(), |x| format!("{x:.0} s"))
        };
        writeln!(
            out,
            "{:<12} {:<24} {:>18} {:>9} {:>8.1}% {:>9}  {}{}",
            r.loop_tag,
            rfc3339(r.start_ms),
            format!("{} → {}", d["sp_from"], d["sp_to"]),
            secs("settling_time_s"),
            r.overshoot_pct,
            secs("min_settling_time_s"),
            r.verdict.as_str(),
            if r.is_final { "" } else { " (open)" }
        )?;
    }
    Ok(())
}

pub async fn alerts(args: &AlertsArgs, out: &mut dyn Write) -> anyhow::Result<()> {
    if let Some(id) = args.ack {
        let path = store_path(&args.store)?;
        let store = Store::open(&path)
            .await
            .map_err(|e| UsageError(e.to_string()))?;
        let done = store
            .ack_alert(id, jiff::Timestamp::now().as_millisecond())
            .await?;
        store.close().await;
        if !done {
            return Err(UsageError(format!("no open alert with id {id}")).into());
        }
        writeln!(out, "alert {id} acknowledged")?;
        return Ok(());
    }
    let store = open(&args.store).await?;
    let rows = store.alerts(args.open).await?;
    if args.store.json {
        serde_json::to_writer_pretty(&mut *out, &rows)?;
        writeln!(out)?;
        return Ok(());
    }
    if rows.is_empty() {
        writeln!(out, "No alerts.")?;
    }
    for a in rows {
        writeln!(
            out,
            "#{} {} {} [{}] ×{} first {} last {}\n    {}",
            a.id,
            a.loop_tag,
            a.kind,
            a.state.as_str(),
            a.count,
            rfc3339(a.first_seen_ms),
            rfc3339(a.last_seen_ms),
            a.message
        )?;
    }
    Ok(())
}

/// Writes `time,sp,pv,op[,mode]` rows joined on the PV's time stamps exactly as the live tracker
/// joins them, so `analyze` on the export sees what the daemon saw.
pub async fn export(args: &ExportArgs, out: &mut dyn Write) -> anyhow::Result<()> {
    let from = args
        .from
        .as_deref()
        .map(parse_time)
        .transpose()?
        .unwrap_or(i64::MIN);
    let to = args
        .to
        .as_deref()
        .map(parse_time)
        .transpose()?
        .unwrap_or(i64::MAX);
    let store = open(&args.store).await?;
    let (rows, with_mode) = store
        .loop_rows(&args.loop_tag, from, to)
        .await
        .with_context(|| format!("cannot read the samples of {}", args.loop_tag))?;
    writeln!(out, "time,sp,pv,op{}", if with_mode { ",mode" } else { "" })?;
    for r in rows {
        let t = rfc3339((r.time_s * 1000.0).round() as i64);
        if with_mode {
            writeln!(out, "{t},{},{},{},{}", r.sp, r.pv, r.op, u8::from(r.auto))?;
        } else {
            writeln!(out, "{t},{},{},{}", r.sp, r.pv, r.op)?;
        }
    }
    Ok(())
}

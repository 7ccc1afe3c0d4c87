//! `headroom alerts`: alerts from the store, and acknowledging one.

use super::store::{StoreArgs, open_read_only, store_path, write_json};
use super::{Failure, Usage};
use crate::store::Store;
use crate::units::rfc3339;
use clap::Args;
use std::io::Write;

#[derive(Debug, Args)]
pub struct AlertsArgs {
    #[command(flatten)]
    pub store: StoreArgs,
    /// Only open alerts.
    #[arg(long)]
    pub open: bool,
    /// Acknowledge the alert with this id.
    #[arg(long, value_name = "ID", value_parser = clap::value_parser!(i64).range(1..))]
    pub ack: Option<i64>,
}

pub async fn alerts(args: &AlertsArgs, out: &mut dyn Write) -> Result<(), Failure> {
    if let Some(id) = args.ack {
        let path = store_path(&args.store)?;
        let store = Store::open(&path).await.map_err(Failure::StoreOpen)?;
        let done = store
            .ack_alert(id, jiff::Timestamp::now().as_millisecond())
            .await?;
        store.close().await;
        if !done {
            return Err(Usage::NoOpenAlert(id).into());
        }
        writeln!(out, "alert {id} acknowledged")?;
        return Ok(());
    }
    let store = open_read_only(&args.store).await?;
    let rows = store.alerts(args.open).await?;
    if args.store.json {
        return write_json(&rows, out);
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

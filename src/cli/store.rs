//! Where the store is, for the commands that read it: the config's store path, or a database
//! file directly.

use super::{Failure, Usage};
use crate::config::Config;
use crate::store::Store;
use clap::Args;
use std::collections::BTreeMap;
use std::io::Write;
use std::path::PathBuf;

/// Where the store is: the config's store path, or a database file directly.
#[derive(Debug, Args)]
pub struct StoreArgs {
    /// Read the store path from this configuration file.
    #[arg(long, value_name = "FILE", conflicts_with = "db")]
    pub config: Option<PathBuf>,
    /// The SQLite store file.
    #[arg(long, value_name = "FILE")]
    pub db: Option<PathBuf>,
    /// Print JSON.
    #[arg(long)]
    pub json: bool,
}

/// The store file named by `--db` or by the config's store path.
pub fn store_path(args: &StoreArgs) -> Result<PathBuf, Failure> {
    match (&args.db, &args.config) {
        (Some(db), _) => Ok(db.clone()),
        (None, Some(cfg)) => Ok(Config::load(cfg)?.store_path(cfg)),
        (None, None) => Err(Usage::NoStore.into()),
    }
}

/// The store, opened read-only.
pub async fn open_read_only(args: &StoreArgs) -> Result<Store, Failure> {
    let path = store_path(args)?;
    Store::open_read_only(&path)
        .await
        .map_err(Failure::StoreOpen)
}

/// Prints `value` as pretty JSON, for `--json`.
pub fn write_json(value: &impl serde::Serialize, out: &mut dyn Write) -> Result<(), Failure> {
    serde_json::to_writer_pretty(&mut *out, value)?;
    writeln!(out)?;
    Ok(())
}

/// What the configuration says about a loop, when `--config` gave one: its unit and the hash of
/// its settings.
pub(super) struct LoopFacts {
    pub pv_unit: String,
    pub settings_hash: Option<String>,
}

pub(super) fn loop_facts(args: &StoreArgs) -> Result<BTreeMap<String, LoopFacts>, Failure> {
    let Some(path) = &args.config else {
        return Ok(BTreeMap::new());
    };
    let config = Config::load(path)?;
    Ok(config
        .loops
        .iter()
        .map(|(tag, l)| {
            let facts = LoopFacts {
                pv_unit: l.pv_unit.clone(),
                settings_hash: l
                    .setup(tag)
                    .ok()
                    .map(|s| crate::summary_format::settings_hash([&s])),
            };
            (tag.clone(), facts)
        })
        .collect())
}

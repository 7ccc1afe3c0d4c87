//! Helpers shared by the integration tests.

use std::path::PathBuf;

/// The `headroom` binary that Cargo built for this test run.
pub fn headroom_bin() -> PathBuf {
    PathBuf::from(env!("CARGO_BIN_EXE_headroom"))
}

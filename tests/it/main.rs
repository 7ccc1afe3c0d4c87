//! The one integration-test binary. Each module tests one capability through the public API or the
//! built `headroom` binary; shared helpers live in `helpers`.

mod cli;
mod corpus;
mod example_data;
mod helpers;
mod reference_python;
mod scenarios;

//! Build script: `sqlx::migrate!()` embeds `migrations/` at compile time, so a changed or added
//! migration must trigger a rebuild even when no Rust file changed.

fn main() {
    println!("cargo:rerun-if-changed=migrations");
}

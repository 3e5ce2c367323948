//! Rebuilds the daemon when anything under `web/` changes: the dashboard is embedded with `include_dir!`,
//! which on stable Rust tracks the files it saw but not files added later.

fn main() {
    println!("cargo:rerun-if-changed=../web");
    println!("cargo:rerun-if-changed=build.rs");
}

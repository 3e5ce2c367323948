//! The `oedolog` binary: parses the command line and hands over to the library.

use clap::Parser;

/// Data-acquisition daemon for incremental-loading oedometer tests.
#[derive(Parser, Debug)]
#[command(name = "oedolog", version, about, long_about = None)]
struct Cli {}

fn main() {
    let _cli = Cli::parse();
}

//! The `plumbline` command: parses the command line and exits with the status the command gives.

use clap::Parser;

fn main() {
    let cli = plumbline::cli::Cli::parse();
    std::process::exit(plumbline::cli::run(cli));
}

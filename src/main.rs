use clap::Parser;

fn main() {
    let cli = plumbline::cli::Cli::parse();
    std::process::exit(plumbline::cli::run(cli));
}

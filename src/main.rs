//! The `construe` binary: parse arguments, call the library, exit with its code.

use clap::Parser;

fn main() -> std::process::ExitCode {
    tracing_subscriber::fmt()
        .with_env_filter(tracing_subscriber::EnvFilter::from_env("CONSTRUE_LOG"))
        .with_writer(std::io::stderr)
        .init();
    let exit = construe::cli::dispatch(construe::cli::Cli::parse());
    std::process::ExitCode::from(exit as u8)
}

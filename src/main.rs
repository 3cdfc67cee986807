//! The `construe` binary: parse arguments, call the library, exit with its code.

use clap::Parser;

fn main() -> std::process::ExitCode {
    let cli = match construe::cli::Cli::try_parse() {
        Ok(cli) => cli,
        Err(e) => return std::process::ExitCode::from(construe::cli::usage_exit(&e) as u8),
    };
    tracing_subscriber::fmt()
        .with_env_filter(tracing_subscriber::EnvFilter::new(cli.log_filter()))
        .with_writer(std::io::stderr)
        .with_ansi(std::io::IsTerminal::is_terminal(&std::io::stderr()))
        .init();
    let exit = construe::cli::dispatch(cli);
    std::process::ExitCode::from(exit as u8)
}

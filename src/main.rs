//! The `unblend` command: parse the command line and run it.

fn main() -> std::process::ExitCode {
    unblend::cli::main()
}

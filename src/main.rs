//! The `sutura` binary: parses the command line and hands over to [`sutura::cli::run`].

fn main() -> std::process::ExitCode {
    sutura::cli::main()
}

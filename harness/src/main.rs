//! The `gripsweep` command: the library's front end over the built-in laws
//! ([`gripsweep::cli`]).

fn main() -> std::process::ExitCode {
    gripsweep::cli::main()
}

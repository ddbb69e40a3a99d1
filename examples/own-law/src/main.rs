//! The whole gripsweep command line with one more law: `cargo run --release -p
//! gripsweep-own-law -- run examples/own-law/study.toml --out own-law-run`.

fn main() -> std::process::ExitCode {
    gripsweep::cli::main_with_laws(vec![gripsweep_own_law::entry()])
}

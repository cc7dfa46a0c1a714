//! The `lacuna` binary: parse arguments, call the library, print, exit.
//! All logic lives in the library; see `lacuna::cli`-style runners in src/cli.

mod cli;

fn main() {
    std::process::exit(cli::run());
}

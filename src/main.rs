//! The `lacuna` binary: parse arguments, call the library, print, exit.
//! All logic lives in the library; one runner per subcommand lives in src/cli.

// `!(x > 0.0)` is used on purpose: NaN must fail such checks.
#![allow(clippy::neg_cmp_op_on_partial_ord)]

mod cli;

fn main() {
    std::process::exit(cli::run());
}

//! The `morbus` command line: a thin layer over the library (see `src/cli/`).

fn main() {
    std::process::exit(morbus_cli::run());
}

#[path = "cli/mod.rs"]
mod morbus_cli;

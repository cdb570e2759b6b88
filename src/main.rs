//! The `sightline` binary: the command line over the shipped plants.

fn main() -> std::process::ExitCode {
    sightline::cli::main_with(sightline::shipped())
}

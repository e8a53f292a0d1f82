//! The `formfactory` command: parse arguments, run, turn an error into a message and an exit code.

fn main() -> std::process::ExitCode {
    formfactory::cli::main()
}

//! The `wallflux` binary; everything lives in the library.

fn main() -> std::process::ExitCode {
    wallflux::app::main()
}

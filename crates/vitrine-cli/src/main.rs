//! The `vitrine` command: parses the flags and hands each command to its module in the library.

// The map engine allocates and frees large buffers every round; this allocator, told to by
// `keep_freed_memory`, keeps them mapped instead of handing them back to the system and
// faulting them in again.
#[global_allocator]
static ALLOCATOR: mimalloc::MiMalloc = mimalloc::MiMalloc;

use std::process::ExitCode;

fn main() -> ExitCode {
    match vitrine_cli::run(vitrine_cli::Cli::parse_args()) {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("error: {e:#}");
            ExitCode::FAILURE
        }
    }
}

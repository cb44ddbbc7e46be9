//! The `vitrine` command: parses the flags and hands each command to its module in the library.

// The map engine allocates and frees large buffers every round; this allocator, told to by
// `keep_freed_memory`, keeps them mapped instead of handing them back to the system and
// faulting them in again.
#[global_allocator]
static ALLOCATOR: mimalloc::MiMalloc = mimalloc::MiMalloc;

use std::process::ExitCode;

use clap::{Parser, Subcommand};
use vitrine_cli::{build, corpus, export, inspect, serve};

#[derive(Parser)]
#[command(
    name = "vitrine",
    version,
    about = "Build and share image-collection atlases"
)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    Build(Box<build::BuildArgs>),
    Serve(serve::ServeArgs),
    Inspect(inspect::InspectArgs),
    Export(export::ExportArgs),
    Corpus(Box<corpus::CorpusArgs>),
}

fn main() -> ExitCode {
    let done = match Cli::parse().command {
        Command::Build(a) => {
            vitrine_cli::keep_freed_memory();
            build::run(*a)
        }
        // The server gives back what its connections freed (it runs for days).
        Command::Serve(a) => serve::run(a),
        Command::Inspect(a) => inspect::run(a),
        Command::Export(a) => export::run(a),
        Command::Corpus(a) => corpus::run(*a),
    };
    match done {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("error: {e:#}");
            ExitCode::FAILURE
        }
    }
}

//! The `vitrine` command's library: one module per command, each with its flags (documented
//! there, the one place) converted once into the typed options of the library that does the
//! work; the small HTTP server of `vitrine serve`; the terminal's progress bars. `main.rs` only
//! parses the flags and dispatches.

pub mod build;
/// The viewer files compiled into the binary (none when they had not been built; see build.rs).
pub mod embedded {
    include!(concat!(env!("OUT_DIR"), "/viewer_files.rs"));
}
pub mod coding;
pub mod corpus;
pub mod export;
pub mod grow;
pub mod http;
pub mod inspect;
pub mod measure;
pub mod progress;
pub mod serve;

use clap::{Parser, Subcommand};

/// The command line: one subcommand.
#[derive(Parser)]
#[command(
    name = "vitrine",
    version,
    about = "Build and share image-collection atlases"
)]
pub struct Cli {
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

impl Cli {
    /// The process's own arguments (help, version and flag errors are printed and end the process).
    pub fn parse_args() -> Cli {
        Cli::parse()
    }

    /// Arguments given as words (the first is the program's name); a flag error is returned with
    /// clap's message, help and version as the text to show.
    pub fn from_words<I, T>(words: I) -> Result<Cli, String>
    where
        I: IntoIterator<Item = T>,
        T: Into<std::ffi::OsString> + Clone,
    {
        Cli::try_parse_from(words).map_err(|e| e.render().to_string())
    }
}

/// Runs one command.
pub fn run(cli: Cli) -> anyhow::Result<()> {
    match cli.command {
        Command::Build(a) => {
            keep_freed_memory();
            build::run(*a)
        }
        // The server gives back what its connections freed (it runs for days).
        Command::Serve(a) => serve::run(a),
        Command::Inspect(a) => inspect::run(a),
        Command::Export(a) => export::run(a),
        Command::Corpus(a) => corpus::run(*a),
    }
}

/// Tells the allocator (mimalloc, the binaries' global allocator) to keep freed memory for reuse
/// instead of returning it to the system a few milliseconds later: the map engine frees and
/// allocates buffers of the same sizes every round, and memory handed back has to be faulted in
/// and zeroed again by the system (about a tenth of the neighbour graph's time on 100,000 items).
/// A build is one process that ends when the atlas is written, so nothing is held for long.
pub fn keep_freed_memory() {
    // mi_option_purge_delay: entry 15 of `mi_option_e` in the bundled mimalloc's
    // include/mimalloc.h (v2 and v3 alike; the Rust bindings name 14 and 16 but not 15);
    // -1 means never purge.
    const MI_OPTION_PURGE_DELAY: libmimalloc_sys::mi_option_t = 15;
    // SAFETY: setting an option is a plain store into mimalloc's option table.
    unsafe { libmimalloc_sys::mi_option_set(MI_OPTION_PURGE_DELAY, -1) }
}

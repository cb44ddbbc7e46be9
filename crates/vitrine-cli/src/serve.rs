//! `vitrine serve`: an atlas folder over HTTP (see [`crate::http`]).

use std::path::PathBuf;

use anyhow::Result;
use clap::Args;

/// Serve an atlas folder over HTTP on this machine.
#[derive(Args)]
pub struct ServeArgs {
    /// The atlas folder to serve.
    dir: PathBuf,
    /// Address to listen on. 127.0.0.1 keeps the atlas on this machine; 0.0.0.0 shows it to your network.
    #[arg(long, default_value = "127.0.0.1")]
    host: String,
    #[arg(long, default_value_t = 8080)]
    port: u16,
}

pub fn run(a: ServeArgs) -> Result<()> {
    if !a.dir.join(vitrine_format::MANIFEST_FILE).is_file() {
        anyhow::bail!(
            "{} is not an atlas folder (it has no {})",
            a.dir.display(),
            vitrine_format::MANIFEST_FILE
        );
    }
    let local = a.host == "127.0.0.1" || a.host == "localhost" || a.host == "::1";
    crate::http::serve(&a.dir, &a.host, a.port, |url| {
        println!("Serving {} at {url}  (Ctrl-C stops)", a.dir.display());
        if !local {
            eprintln!(
                "warning: listening on {}: other machines on your network can open this atlas, \
                 with its thumbnails and catalogue data",
                a.host
            );
        }
    })
}

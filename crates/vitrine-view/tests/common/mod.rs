//! Atlases for the viewer's tests: built by `vitrine build` and read back as the viewer holds them.
#![allow(dead_code)]

use vitrine_build::pipeline::{build, BuildOptions, Silent};
use vitrine_build::read::Atlas;
use vitrine_view::atlas::AtlasData;

/// Builds the atlas `o` describes and reads every file the viewer fetches whole (the catalogue
/// included; neighbour chunks are fetched one by one, see `AtlasData::neighbours`).
pub fn build_and_open(o: &BuildOptions) -> (AtlasData, Atlas) {
    build(o, &Silent).unwrap();
    let on_disk = Atlas::open(&o.out).unwrap();
    let m = on_disk.manifest.clone();
    let files = on_disk
        .load_files(AtlasData::files(&m).iter().map(|(f, _)| f.as_str()))
        .unwrap();
    (AtlasData::from_parts(m, &files).unwrap(), on_disk)
}

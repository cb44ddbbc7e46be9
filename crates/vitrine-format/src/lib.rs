//! The atlas on disk.
//!
//! An atlas is a folder with one JSON manifest (`atlas.json`) and a set of binary
//! arrays under `arrays/`. Every array is declared in the manifest with its element
//! type, element count, byte length and SHA-256, and readers check all four before
//! handing out typed data. Nothing here panics on bad bytes: every failure is an
//! [`AtlasError`].
//!
//! Beside the atlas it holds what build, viewer and tests must agree on: the colours of the
//! product (`palette`) and NumPy's `.npy` layout (`npy`).
//!
//! Invariant: this crate has no dependency that cannot compile for wasm32, and reads no files.

use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};

mod files;
pub mod npy;
pub mod palette;
pub mod pyramid;
pub mod spacing;
pub mod tiles;

pub use files::AtlasFiles;

/// The format version of an atlas fetched whole (this crate reads it and the tiled version).
pub const FORMAT_VERSION: u32 = 2;
/// The format version of a tiled atlas ([`tiles`]): format 2 with its items in tile order and every
/// per-item array stored by leaf of the tile pyramid.
pub const TILED_FORMAT_VERSION: u32 = 3;
/// The value of the manifest's `format` key.
pub const FORMAT_NAME: &str = "vitrine-atlas";
/// File name of the manifest inside an atlas folder.
pub const MANIFEST_FILE: &str = "atlas.json";

#[derive(Debug, thiserror::Error)]
pub enum AtlasError {
    #[error("manifest is not valid JSON: {0}")]
    ManifestJson(String),
    #[error("not a Vitrine atlas manifest (format = {0:?})")]
    NotAnAtlas(String),
    #[error(
        "atlas format version {found} is not supported (this reader knows version {supported})"
    )]
    UnsupportedVersion { found: u32, supported: u32 },
    #[error("array {file}: expected {expected} bytes, found {found}")]
    WrongLength {
        file: String,
        expected: u64,
        found: u64,
    },
    #[error("array {file}: declared {count} elements of {dtype:?} but {bytes} bytes")]
    InconsistentDeclaration {
        file: String,
        count: u64,
        dtype: DType,
        bytes: u64,
    },
    #[error("array {file}: checksum mismatch (manifest says {expected}, data hashes to {found})")]
    Checksum {
        file: String,
        expected: String,
        found: String,
    },
    #[error("array {file}: element type is {found:?}, the reader asked for {wanted:?}")]
    WrongType {
        file: String,
        found: DType,
        wanted: DType,
    },
    #[error("array {file}: {reason}")]
    BadContent { file: String, reason: String },
    #[error("manifest is inconsistent: {0}")]
    Inconsistent(String),
}

/// Element type of a binary array. All arrays are little-endian.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum DType {
    U8,
    U32,
    I32,
    F32,
}

impl DType {
    pub fn size(self) -> u64 {
        match self {
            DType::U8 => 1,
            DType::U32 | DType::I32 | DType::F32 => 4,
        }
    }
}

/// Declaration of one binary array file.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ArrayRef {
    /// Path relative to the atlas folder, always with forward slashes.
    pub file: String,
    pub dtype: DType,
    /// Number of elements (not bytes).
    pub count: u64,
    pub bytes: u64,
    /// Lower-case hex SHA-256 of the file's bytes.
    pub sha256: String,
}

pub fn sha256_hex(bytes: &[u8]) -> String {
    hex(&Sha256::digest(bytes))
}

/// The SHA-256 digest of `bytes`.
pub fn sha256_bytes(bytes: &[u8]) -> [u8; 32] {
    Sha256::digest(bytes).into()
}

/// Lower-case hex of bytes, two digits each.
pub fn hex(bytes: &[u8]) -> String {
    let mut s = String::with_capacity(2 * bytes.len());
    for b in bytes {
        s.push_str(&format!("{b:02x}"));
    }
    s
}

/// A dating as whole years, both ends included (a single year has `start == end`); years before
/// the common era are negative.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub struct YearRange {
    pub start: i32,
    pub end: i32,
}

/// The largest year a dating may give (and, negated, the smallest): the build reads nothing beyond,
/// and a reader takes a dating beyond as undated.
pub const MAX_YEAR: i32 = 9_999;

/// A thumbnail extent as the `extents` array packs it (width | height << 16), unpacked.
pub fn unpack_extent(e: u32) -> (u16, u16) {
    ((e & 0xFFFF) as u16, (e >> 16) as u16)
}

/// Element types that can be cast from little-endian bytes.
pub trait Element: bytemuck::Pod {
    const DTYPE: DType;
}
impl Element for u8 {
    const DTYPE: DType = DType::U8;
}
impl Element for u32 {
    const DTYPE: DType = DType::U32;
}
impl Element for i32 {
    const DTYPE: DType = DType::I32;
}
impl Element for f32 {
    const DTYPE: DType = DType::F32;
}

impl ArrayRef {
    /// Declares `data` as the array stored at `file` and returns the declaration and the bytes to write.
    pub fn encode<T: Element>(file: &str, data: &[T]) -> (ArrayRef, Vec<u8>) {
        // Little-endian on disk: every target we build for is little-endian, and
        // this is checked at compile time below.
        let bytes: Vec<u8> = bytemuck::cast_slice(data).to_vec();
        let r = ArrayRef {
            file: file.to_string(),
            dtype: T::DTYPE,
            count: data.len() as u64,
            bytes: bytes.len() as u64,
            sha256: sha256_hex(&bytes),
        };
        (r, bytes)
    }

    /// Checks length and checksum of `bytes` against this declaration.
    pub fn verify(&self, bytes: &[u8]) -> Result<(), AtlasError> {
        if self.count.checked_mul(self.dtype.size()) != Some(self.bytes) {
            return Err(AtlasError::InconsistentDeclaration {
                file: self.file.clone(),
                count: self.count,
                dtype: self.dtype,
                bytes: self.bytes,
            });
        }
        if bytes.len() as u64 != self.bytes {
            return Err(AtlasError::WrongLength {
                file: self.file.clone(),
                expected: self.bytes,
                found: bytes.len() as u64,
            });
        }
        let found = sha256_hex(bytes);
        if found != self.sha256 {
            return Err(AtlasError::Checksum {
                file: self.file.clone(),
                expected: self.sha256.clone(),
                found,
            });
        }
        Ok(())
    }

    /// Verifies `bytes` and copies them out as typed elements.
    pub fn decode<T: Element>(&self, bytes: &[u8]) -> Result<Vec<T>, AtlasError> {
        if self.dtype != T::DTYPE {
            return Err(AtlasError::WrongType {
                file: self.file.clone(),
                found: self.dtype,
                wanted: T::DTYPE,
            });
        }
        self.verify(bytes)?;
        // Copy element by element so that unaligned input buffers are fine.
        let size = std::mem::size_of::<T>();
        Ok(bytes
            .chunks_exact(size)
            .map(bytemuck::pod_read_unaligned::<T>)
            .collect())
    }
}

const _: () = assert!(
    cfg!(target_endian = "little"),
    "the atlas format is little-endian"
);

/// Kinds of catalogue field.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum FieldKind {
    /// One value from a small vocabulary. Column: u32 code per item into `values`; `u32::MAX` = empty.
    Category,
    /// A number. Column: f32 per item; NaN = empty.
    Number,
    /// A year range. Columns: `start` and `end`, i32 years per item; `i32::MIN` = empty.
    Date,
    /// Free text. Column: a text table (see [`TextTable`]).
    Text,
    /// A URL to the full image or record. Stored as text.
    Link,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Field {
    pub name: String,
    pub kind: FieldKind,
    /// Category codes (a multi-valued field: each item's first value), f32 numbers, or for
    /// text/link fields the text table's offsets.
    pub column: ArrayRef,
    /// Date fields: the end years (the start years are in `column`). Text fields: the UTF-8 bytes.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub column2: Option<ArrayRef>,
    /// Category fields: the vocabulary, in code order, and the count of each value.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub values: Vec<String>,
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub value_counts: Vec<u64>,
    /// Date and number fields: each value as the catalogue wrote it ("c. 1540"), a text table
    /// (offsets, bytes), so that the record card shows the record's own words.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub written: Option<[ArrayRef; 2]>,
    /// Multi-valued category fields (keywords, subject headings, classification codes: several
    /// values per record): every item's values, `offsets` (u32, items + 1, from 0) into `codes`
    /// (u32, each a value's index, no repeats within an item). `value_counts` then counts the
    /// items holding each value, and `written` keeps each record's values as catalogued.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub multi: Option<[ArrayRef; 2]>,
    /// A multi-valued field's separator in `written` (`;`, `|`, or the one the build was told).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub multi_separator: Option<String>,
}

/// A text column: `offsets` (u32, count + 1 entries, starting at 0) into `utf8` bytes.
#[derive(Debug, Clone, PartialEq)]
pub struct TextTable {
    pub offsets: Vec<u32>,
    pub utf8: Vec<u8>,
}

impl TextTable {
    pub fn from_strings<S: AsRef<str>>(items: &[S]) -> TextTable {
        let mut offsets = Vec::with_capacity(items.len() + 1);
        let mut utf8 = Vec::new();
        offsets.push(0);
        for s in items {
            utf8.extend_from_slice(s.as_ref().as_bytes());
            offsets.push(utf8.len() as u32);
        }
        TextTable { offsets, utf8 }
    }

    /// Checks that offsets are monotone, in range, and cut the bytes at UTF-8 boundaries.
    pub fn validate(&self, file: &str, expected_items: u64) -> Result<(), AtlasError> {
        let bad = |reason: String| AtlasError::BadContent {
            file: file.to_string(),
            reason,
        };
        if self.offsets.len() as u64 != expected_items + 1 {
            return Err(bad(format!(
                "{} offsets for {} items",
                self.offsets.len(),
                expected_items
            )));
        }
        if self.offsets.first() != Some(&0) {
            return Err(bad("first offset is not 0".into()));
        }
        if *self.offsets.last().unwrap_or(&0) as usize != self.utf8.len() {
            return Err(bad("last offset is not the text length".into()));
        }
        if self.offsets.windows(2).any(|w| w[0] > w[1]) {
            return Err(bad("offsets decrease".into()));
        }
        let text =
            std::str::from_utf8(&self.utf8).map_err(|e| bad(format!("text is not UTF-8: {e}")))?;
        if let Some(o) = self
            .offsets
            .iter()
            .find(|&&o| !text.is_char_boundary(o as usize))
        {
            return Err(bad(format!("offset {o} splits a character")));
        }
        Ok(())
    }

    pub fn len(&self) -> usize {
        self.offsets.len().saturating_sub(1)
    }

    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// The i-th string. Only valid after [`TextTable::validate`]; returns "" when out of range.
    pub fn get(&self, i: usize) -> &str {
        match (self.offsets.get(i), self.offsets.get(i + 1)) {
            (Some(&a), Some(&b)) => {
                std::str::from_utf8(&self.utf8[a as usize..b as usize]).unwrap_or("")
            }
            _ => "",
        }
    }
}

/// One 2-D layout of the items.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct MapLayout {
    /// "similarity", "timeline", "lattice", ...
    pub name: String,
    pub description: String,
    /// Interleaved x, y (f32) per item, in atlas item order.
    pub positions: ArrayRef,
    /// [min_x, min_y, max_x, max_y]
    pub bounds: [f32; 4],
    /// Maps whose x axis is a quantity (the timeline map: years): how to label it.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub x_axis: Option<MapAxis>,
}

/// Clusters: a u32 cluster number per item (index into `list`) and each cluster's description.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Clusters {
    pub method: String,
    pub ids: ArrayRef,
    pub list: Vec<ClusterInfo>,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ClusterInfo {
    pub size: u64,
    /// A short label made from the most over-represented catalogue values (or "cluster N").
    pub label: String,
    /// Where the label goes on the similarity map (the members' median position).
    pub position: [f32; 2],
    /// The over-represented values: field, value, share in the cluster, lift over the collection.
    #[serde(default)]
    pub terms: Vec<ClusterTerm>,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ClusterTerm {
    pub field: String,
    pub value: String,
    pub share: f64,
    pub lift: f64,
}

/// A map's x axis in catalogue units: value = origin + x * units_per_map_unit.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct MapAxis {
    /// What the axis measures, e.g. the date field's name.
    pub label: String,
    pub origin: f64,
    pub units_per_map_unit: f64,
    /// Items without a value sit in a band around this x, left of the axis.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub missing_at: Option<f32>,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Neighbours {
    pub k: u32,
    pub metric: String,
    pub exact: bool,
    /// Items per chunk: chunk c holds the lists of items `c * chunk_items ..` (the last may hold
    /// fewer). Items are in map order, so a chunk is a region of the map and a reader fetches only
    /// the chunks of the records it shows.
    pub chunk_items: u32,
    pub chunks: Vec<NeighbourChunk>,
}

/// The neighbour lists of one run of items.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct NeighbourChunk {
    /// u32 item indices, k per item, nearest first; `u32::MAX` pads when fewer exist.
    pub ids: ArrayRef,
    /// f32 distances matching `ids`.
    pub distances: ArrayRef,
}

/// Items per neighbour chunk that `vitrine build` writes: 16,384 lists of k = 15 are ~1 MB.
pub const NEIGHBOUR_CHUNK_ITEMS: u32 = 16_384;

impl Neighbours {
    /// How the graph was made, in words: "15 nearest, cosine distance, exact search".
    pub fn describe(&self) -> String {
        format!(
            "{} nearest, {} distance, {}",
            self.k,
            self.metric,
            if self.exact {
                "exact search"
            } else {
                "approximate (NN-descent)"
            }
        )
    }

    /// The chunk holding item `i`'s list.
    pub fn chunk_of(&self, i: usize) -> usize {
        i / self.chunk_items.max(1) as usize
    }
    /// The items whose lists chunk `c` holds, of `n` items in all.
    pub fn chunk_items_range(&self, c: usize, n: usize) -> std::ops::Range<usize> {
        let per = self.chunk_items.max(1) as usize;
        (c * per).min(n)..((c + 1) * per).min(n)
    }
}

/// One level of detail of the thumbnails.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SheetLevel {
    /// Cell edge in pixels; a thumbnail fits inside a cell with its aspect kept.
    pub cell: u32,
    /// Cells per row and per column of one sheet.
    pub columns: u32,
    pub rows: u32,
    /// Sheet image files, relative to the atlas folder. Item i sits in sheet i / (columns*rows),
    /// cell i % (columns*rows), row-major.
    pub files: Vec<String>,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Sheets {
    pub levels: Vec<SheetLevel>,
    /// u32 per item: thumbnail width and height inside its cell at the largest level, packed as w | h << 16.
    pub extents: ArrayRef,
    /// u32 pairs per item (2 x items values): the image's width and height in pixels as shown, after
    /// its EXIF orientation; 0, 0 where the image could not be used.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub image_sizes: Option<ArrayRef>,
    /// u32 per item: the sheet cell holding its picture, when items share pictures (absent: item
    /// i's picture is in cell i). Cells then count pictures, not items. Tiled atlases only.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub pictures: Option<ArrayRef>,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct InputFile {
    /// "vectors", "catalogue", "images"
    pub role: String,
    pub path: String,
    pub bytes: u64,
    pub sha256: String,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Provenance {
    pub tool: String,
    pub tool_version: String,
    pub inputs: Vec<InputFile>,
    /// Every build parameter, by its CLI name.
    pub parameters: serde_json::Map<String, serde_json::Value>,
    pub seed: u64,
}

/// Items the browser's vectors hold per chunk file (the last chunk may hold fewer).
pub const VECTOR_CHUNK_ITEMS: u32 = 65_536;

/// Every item's vector compressed for the browser: its leading principal components, one byte
/// each. Component j of an item is `offset[j] + scale[j] * q` for its byte q. Rows in atlas
/// order, `dims` bytes an item, in chunks of `chunk_items` items (`arrays/vectors/q8-CCCC.bin`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct BrowserVectors {
    pub dims: u32,
    pub offset: Vec<f32>,
    pub scale: Vec<f32>,
    pub chunk_items: u32,
    pub chunks: Vec<ArrayRef>,
    /// The share of the vectors' variance the components hold, 0–1.
    pub explained_variance: f64,
    /// How the components were found and quantised.
    pub method: String,
}

impl BrowserVectors {
    /// Decodes item `at`'s row of chunk bytes `bytes` (the item's index within its chunk).
    pub fn decode(&self, bytes: &[u8], at: usize, out: &mut [f32]) {
        let d = self.dims as usize;
        for ((o, &q), (&off, &sc)) in out
            .iter_mut()
            .zip(&bytes[at * d..(at + 1) * d])
            .zip(self.offset.iter().zip(&self.scale))
        {
            *o = off + sc * q as f32;
        }
    }
}

/// Groups of items whose pictures are copies of one picture (see docs/atlas-format.md): the
/// groups' members, atlas item indices grouped and ascending within each group, with each group's
/// start; and the confirmed pairs that joined them, with the pair's hash distance.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Copies {
    /// How candidate pairs were found and confirmed, in words.
    pub method: String,
    /// Hash distance (bits of 64) at most, colour correlation at least, and vector distance at
    /// most this share of the 75th percentile of the item's neighbour distances, for a candidate to be a copy.
    pub max_bits: u32,
    pub min_colour: f32,
    pub ratio: f32,
    /// u32: the members of every group, group by group.
    pub members: ArrayRef,
    /// u32, groups + 1 entries: where each group starts in `members` (the last: their count).
    pub starts: ArrayRef,
    /// u32, two per pair: the items of each confirmed pair.
    pub pairs: ArrayRef,
    /// u8, one per pair: the pair's hash distance in bits.
    pub pair_bits: ArrayRef,
    /// The catalogue-like field the build added ("has copies"), if any.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub field: Option<String>,
}

/// Copy groups as read from an atlas and checked: every member an item, in one group only, every
/// group of two or more.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct CopyGroups {
    pub members: Vec<u32>,
    pub starts: Vec<u32>,
    /// Per item: its group, or u32::MAX.
    pub group_of: Vec<u32>,
    pub pairs: Vec<[u32; 2]>,
    pub pair_bits: Vec<u8>,
}

impl CopyGroups {
    /// Checks decoded arrays against `n` items.
    pub fn new(
        n: usize,
        members: Vec<u32>,
        starts: Vec<u32>,
        pairs: Vec<u32>,
        pair_bits: Vec<u8>,
    ) -> Result<CopyGroups, AtlasError> {
        let bad = |what: String| AtlasError::Inconsistent(format!("copy groups: {what}"));
        if starts.first() != Some(&0) || *starts.last().unwrap() as usize != members.len() {
            return Err(bad(format!(
                "group starts must begin at 0 and end at the {} members",
                members.len()
            )));
        }
        let mut group_of = vec![u32::MAX; n];
        for (g, w) in starts.windows(2).enumerate() {
            if w[1] < w[0] || w[1] as usize > members.len() {
                return Err(bad(format!(
                    "group {g}'s start runs back or past the members"
                )));
            }
            if w[1] - w[0] < 2 {
                return Err(bad(format!("group {g} has fewer than two members")));
            }
            for &m in &members[w[0] as usize..w[1] as usize] {
                let slot = group_of
                    .get_mut(m as usize)
                    .ok_or_else(|| bad(format!("member {m} is not one of the {n} items")))?;
                if *slot != u32::MAX {
                    return Err(bad(format!("item {m} is in two groups")));
                }
                *slot = g as u32;
            }
        }
        if pairs.len() != 2 * pair_bits.len() {
            return Err(bad("pairs and their distances differ in number".into()));
        }
        let pairs: Vec<[u32; 2]> = pairs.chunks_exact(2).map(|p| [p[0], p[1]]).collect();
        for p in &pairs {
            let g = |i: u32| group_of.get(i as usize).copied().unwrap_or(u32::MAX);
            if g(p[0]) == u32::MAX || g(p[0]) != g(p[1]) {
                return Err(bad(format!(
                    "pair {} - {} is not within one group",
                    p[0], p[1]
                )));
            }
        }
        Ok(CopyGroups {
            members,
            starts,
            group_of,
            pairs,
            pair_bits,
        })
    }

    pub fn groups(&self) -> usize {
        self.starts.len().saturating_sub(1)
    }

    /// The members of item `i`'s group (itself among them), empty when it has no copies.
    pub fn group(&self, i: usize) -> &[u32] {
        match self.group_of.get(i) {
            Some(&g) if g != u32::MAX => {
                &self.members
                    [self.starts[g as usize] as usize..self.starts[g as usize + 1] as usize]
            }
            _ => &[],
        }
    }
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Manifest {
    pub format: String,
    pub format_version: u32,
    pub title: String,
    pub item_count: u64,
    /// Catalogue ids in atlas item order (a text table: offsets, then bytes).
    pub ids: ArrayRef,
    pub ids_text: ArrayRef,
    /// u32 per item: the row of the item in the input vectors.
    pub source_rows: ArrayRef,
    /// RGBA u8 per item: the average colour of its image (or a mark colour without images).
    pub colours: ArrayRef,
    pub fields: Vec<Field>,
    pub maps: Vec<MapLayout>,
    pub neighbours: Neighbours,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub sheets: Option<Sheets>,
    /// Clusters of the neighbour graph, if computed.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub clusters: Option<Clusters>,
    /// Quality figures by name (e.g. "trustworthiness_10").
    #[serde(default)]
    pub quality: serde_json::Map<String, serde_json::Value>,
    /// Every item's vector compressed for the browser, if the build kept them.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub vectors: Option<BrowserVectors>,
    /// Groups of copies of one picture, if the build looked for them.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub copies: Option<Copies>,
    pub provenance: Provenance,
    /// A tiled atlas's pyramid, cells, overviews and arrays stored by leaf (format 3 only).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub tiles: Option<tiles::Tiles>,
}

impl Manifest {
    /// Parses and checks a manifest: format name, version, and that every declared array has the item count it must.
    pub fn from_json(text: &str) -> Result<Manifest, AtlasError> {
        let value: serde_json::Value =
            serde_json::from_str(text).map_err(|e| AtlasError::ManifestJson(e.to_string()))?;
        let format = value
            .get("format")
            .and_then(|f| f.as_str())
            .unwrap_or("")
            .to_string();
        if format != FORMAT_NAME {
            return Err(AtlasError::NotAnAtlas(format));
        }
        let version = value
            .get("format_version")
            .and_then(|v| v.as_u64())
            .unwrap_or(0) as u32;
        if version != FORMAT_VERSION && version != TILED_FORMAT_VERSION {
            return Err(AtlasError::UnsupportedVersion {
                found: version,
                supported: TILED_FORMAT_VERSION,
            });
        }
        let m: Manifest =
            serde_json::from_value(value).map_err(|e| AtlasError::ManifestJson(e.to_string()))?;
        m.check_counts()?;
        if version != TILED_FORMAT_VERSION
            && m.sheets.as_ref().is_some_and(|s| s.pictures.is_some())
        {
            return Err(AtlasError::Inconsistent(format!(
                "shared pictures are for tiled atlases (format {TILED_FORMAT_VERSION})"
            )));
        }
        match (&m.tiles, version == TILED_FORMAT_VERSION) {
            (Some(t), true) => t.check(&m)?,
            (None, false) => {}
            (Some(_), false) => {
                return Err(AtlasError::Inconsistent(format!(
                    "a format {FORMAT_VERSION} atlas with tiles (tiled atlases are format {TILED_FORMAT_VERSION})"
                )))
            }
            (None, true) => {
                return Err(AtlasError::Inconsistent(format!(
                    "a format {TILED_FORMAT_VERSION} atlas without its tiles"
                )))
            }
        }
        Ok(m)
    }

    pub fn to_json(&self) -> String {
        serde_json::to_string_pretty(self).expect("manifest serialises")
    }

    fn check_counts(&self) -> Result<(), AtlasError> {
        let n = self.item_count;
        let want = |r: &ArrayRef, count: u64, dtype: DType| -> Result<(), AtlasError> {
            if r.count != count || r.dtype != dtype {
                return Err(AtlasError::Inconsistent(format!(
                    "{} should hold {count} {dtype:?} but declares {} {:?}",
                    r.file, r.count, r.dtype
                )));
            }
            if r.count.checked_mul(r.dtype.size()) != Some(r.bytes) {
                return Err(AtlasError::InconsistentDeclaration {
                    file: r.file.clone(),
                    count: r.count,
                    dtype: r.dtype,
                    bytes: r.bytes,
                });
            }
            Ok(())
        };
        want(&self.ids, n + 1, DType::U32)?;
        want(&self.source_rows, n, DType::U32)?;
        want(&self.colours, n * 4, DType::U8)?;
        for m in &self.maps {
            want(&m.positions, n * 2, DType::F32)?;
        }
        let nb = &self.neighbours;
        let k = nb.k as u64;
        let per = nb.chunk_items as u64;
        if per == 0 || nb.chunks.len() as u64 != n.div_ceil(per) {
            return Err(AtlasError::Inconsistent(format!(
                "{} items in neighbour chunks of {per} need {} chunks, the manifest lists {}",
                n,
                n.div_ceil(per.max(1)),
                nb.chunks.len()
            )));
        }
        for (c, chunk) in nb.chunks.iter().enumerate() {
            let items = nb.chunk_items_range(c, n as usize).len() as u64;
            want(&chunk.ids, items * k, DType::U32)?;
            want(&chunk.distances, items * k, DType::F32)?;
        }
        for f in &self.fields {
            match f.kind {
                FieldKind::Category => {
                    want(&f.column, n, DType::U32)?;
                    if let Some([offsets, codes]) = &f.multi {
                        if f.written.is_none() {
                            return Err(AtlasError::Inconsistent(format!(
                                "field {}: several values per record but not as written",
                                f.name
                            )));
                        }
                        want(offsets, n + 1, DType::U32)?;
                        if codes.dtype != DType::U32 {
                            return Err(AtlasError::Inconsistent(format!(
                                "field {}: the multi-valued codes are not u32",
                                f.name
                            )));
                        }
                    }
                    if f.values.len() != f.value_counts.len() {
                        return Err(AtlasError::Inconsistent(format!(
                            "field {}: values and counts differ",
                            f.name
                        )));
                    }
                }
                _ if f.multi.is_some() => {
                    return Err(AtlasError::Inconsistent(format!(
                        "field {}: only category fields hold several values",
                        f.name
                    )))
                }
                FieldKind::Number => want(&f.column, n, DType::F32)?,
                FieldKind::Date => {
                    want(&f.column, n, DType::I32)?;
                    let end = f.column2.as_ref().ok_or_else(|| {
                        AtlasError::Inconsistent(format!(
                            "date field {} has no end-year column",
                            f.name
                        ))
                    })?;
                    want(end, n, DType::I32)?;
                }
                FieldKind::Text | FieldKind::Link => {
                    want(&f.column, n + 1, DType::U32)?;
                    if f.column2.as_ref().map(|c| c.dtype) != Some(DType::U8) {
                        return Err(AtlasError::Inconsistent(format!(
                            "text field {} has no byte column",
                            f.name
                        )));
                    }
                }
            }
        }
        for f in &self.fields {
            if let Some([offsets, bytes]) = &f.written {
                want(offsets, n + 1, DType::U32)?;
                if bytes.dtype != DType::U8 {
                    return Err(AtlasError::Inconsistent(format!(
                        "field {}: written text is not bytes",
                        f.name
                    )));
                }
            }
        }
        if let Some(v) = &self.vectors {
            let (d, per) = (v.dims as u64, v.chunk_items as u64);
            if v.offset.iter().chain(&v.scale).any(|x| !x.is_finite()) {
                return Err(AtlasError::Inconsistent(
                    "the browser's vectors have an offset or scale that is not a number".into(),
                ));
            }
            if d == 0 || v.offset.len() as u64 != d || v.scale.len() as u64 != d {
                return Err(AtlasError::Inconsistent(format!(
                    "the browser's vectors have {d} dimensions but {} offsets and {} scales",
                    v.offset.len(),
                    v.scale.len()
                )));
            }
            if per == 0 || v.chunks.len() as u64 != n.div_ceil(per) {
                return Err(AtlasError::Inconsistent(format!(
                    "{n} items in vector chunks of {per} need {} chunks, the manifest lists {}",
                    n.div_ceil(per.max(1)),
                    v.chunks.len()
                )));
            }
            for (c, chunk) in v.chunks.iter().enumerate() {
                let items = per.min(n - c as u64 * per);
                want(chunk, items * d, DType::U8)?;
            }
        }
        if let Some(c) = &self.clusters {
            want(&c.ids, n, DType::U32)?;
        }
        if let Some(c) = &self.copies {
            want(&c.members, c.members.count, DType::U32)?;
            if c.starts.count == 0 || c.starts.count > c.members.count / 2 + 1 {
                return Err(AtlasError::Inconsistent(format!(
                    "{} copy groups cannot hold {} members",
                    c.starts.count.saturating_sub(1),
                    c.members.count
                )));
            }
            want(&c.starts, c.starts.count, DType::U32)?;
            want(&c.pairs, 2 * c.pair_bits.count, DType::U32)?;
            want(&c.pair_bits, c.pair_bits.count, DType::U8)?;
            if c.members.count > n {
                return Err(AtlasError::Inconsistent(format!(
                    "{} items in copy groups of {n} items",
                    c.members.count
                )));
            }
        }
        if let Some(s) = &self.sheets {
            want(&s.extents, n, DType::U32)?;
            if let Some(sizes) = &s.image_sizes {
                want(sizes, 2 * n, DType::U32)?;
            }
            if let Some(p) = &s.pictures {
                want(p, n, DType::U32)?;
            }
            for l in &s.levels {
                // A sheet is one JPEG, at most 65,535 pixels a side, so a level's cell count
                // (and every product of its sizes a reader forms in u32) stays far below 2^32.
                let side = |k: u32| k as u64 * l.cell as u64;
                if l.cell == 0 || side(l.columns) > 65_535 || side(l.rows) > 65_535 {
                    return Err(AtlasError::Inconsistent(format!(
                        "sheet level {}: {} x {} cells of {} pixels is not a sheet (at most 65,535 pixels a side)",
                        l.cell, l.columns, l.rows, l.cell
                    )));
                }
                let per = (l.columns as u64) * (l.rows as u64);
                // Shared pictures: each item's cell is checked when its `pictures` are read.
                let cells = if s.pictures.is_some() { n.min(1) } else { n };
                if per == 0 || (l.files.len() as u64) < cells.div_ceil(per) {
                    return Err(AtlasError::Inconsistent(format!(
                        "sheet level {} has too few sheets",
                        l.cell
                    )));
                }
            }
        }
        Ok(())
    }

    /// Every binary array the manifest declares.
    pub fn arrays(&self) -> Vec<&ArrayRef> {
        let mut v = vec![&self.ids, &self.ids_text, &self.source_rows, &self.colours];
        v.extend(self.maps.iter().map(|m| &m.positions));
        for c in &self.neighbours.chunks {
            v.push(&c.ids);
            v.push(&c.distances);
        }
        for f in &self.fields {
            v.push(&f.column);
            if let Some(c) = &f.column2 {
                v.push(c);
            }
            if let Some([a, b]) = &f.written {
                v.push(a);
                v.push(b);
            }
            if let Some([a, b]) = &f.multi {
                v.push(a);
                v.push(b);
            }
        }
        if let Some(s) = &self.sheets {
            v.push(&s.extents);
            if let Some(sizes) = &s.image_sizes {
                v.push(sizes);
            }
            v.extend(&s.pictures);
        }
        if let Some(c) = &self.clusters {
            v.push(&c.ids);
        }
        if let Some(b) = &self.vectors {
            v.extend(&b.chunks);
        }
        if let Some(c) = &self.copies {
            v.extend([&c.members, &c.starts, &c.pairs, &c.pair_bits]);
        }
        if let Some(t) = &self.tiles {
            v.extend(t.arrays());
        }
        v
    }
}

/// Reads a text table from its two arrays and validates it.
pub fn decode_text(
    offsets: &ArrayRef,
    off_bytes: &[u8],
    text: &ArrayRef,
    text_bytes: &[u8],
    items: u64,
) -> Result<TextTable, AtlasError> {
    let t = TextTable {
        offsets: offsets.decode::<u32>(off_bytes)?,
        utf8: text.decode::<u8>(text_bytes)?,
    };
    t.validate(&offsets.file, items)?;
    Ok(t)
}

#[cfg(test)]
mod tests;

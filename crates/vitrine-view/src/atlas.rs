//! The atlas as the viewer holds it: checked arrays decoded into plain vectors.

pub use vitrine_corpus::columns::{Column, FieldColumn};
use vitrine_format::{AtlasError, AtlasFiles, FieldKind, Manifest, TextTable};

/// One map of the atlas, decoded.
pub struct MapView {
    pub name: String,
    pub description: String,
    pub positions: Vec<[f32; 2]>,
    pub bounds: [f32; 4],
    pub spacing: f64,
    pub axis: Option<vitrine_format::MapAxis>,
}

pub struct AtlasData {
    pub manifest: Manifest,
    pub n: usize,
    pub ids: TextTable,
    pub positions: Vec<[f32; 2]>,
    pub bounds: [f32; 4],
    pub colours: Vec<[u8; 4]>,
    pub fields: Vec<FieldColumn>,
    /// Neighbour lists, fetched by chunk (a run of items, so a region of the map) when a record
    /// card needs one.
    pub neighbours: NeighbourChunks,
    /// Thumbnail width and height in the largest cell (0 when there are no sheets).
    pub extents: Vec<(u16, u16)>,
    /// Typical spacing between items on the map, in map units (see [`crate::pick::typical_spacing`]).
    pub spacing: f64,
    /// Every map; `positions`, `bounds` and `spacing` above are those of `maps[current]`.
    pub maps: Vec<MapView>,
    pub current: usize,
    /// Cluster number per item (empty when the atlas has no clusters).
    pub clusters: Vec<u32>,
    /// Whether the ids and catalogue columns are loaded (they arrive after the first picture;
    /// until then `ids` and `fields` are empty).
    pub catalogue: bool,
    /// The original images' widths and heights (pairs per item; 0, 0 unknown), with the catalogue.
    pub image_sizes: Vec<u32>,
    /// Groups of copies of one picture (empty when the build found none or did not look), with
    /// the catalogue.
    pub copies: vitrine_format::CopyGroups,
    /// A tiled atlas's pyramid and what of it is here (None: the atlas was fetched whole). Its
    /// items' positions, colours and extents above are filled leaf by leaf as the leaves arrive
    /// and stay (20 bytes an item at most: 500 MB for 25 million); `maps` then holds the tiled
    /// map alone, without positions.
    pub tiled: Option<crate::tiled::Tiled>,
    /// A tiled atlas: the catalogue records of the leaves fetched for record cards, by leaf.
    pub leaf_records: std::collections::HashMap<usize, LeafRecords>,
}

/// One leaf's catalogue records (ids, fields, clusters), its items numbered from 0.
pub struct LeafRecords {
    pub ids: TextTable,
    pub fields: Vec<FieldColumn>,
    pub clusters: Vec<u32>,
}

/// Most items of a tiled atlas the viewer opens: 100 million, 2 GB of drawing data at most.
pub const MAX_TILED_ITEMS: usize = 100_000_000;

/// The per-item arrays a tiled atlas's leaf brings for drawing: positions, colours, extents
/// (with sheets) and pictures (when items share them).
pub fn leaf_arrays(m: &Manifest) -> Vec<&vitrine_format::ArrayRef> {
    let t = m.tiles.as_ref();
    let mut v: Vec<&vitrine_format::ArrayRef> = m
        .maps
        .iter()
        .filter(|p| t.is_some_and(|t| t.map == p.name))
        .map(|p| &p.positions)
        .collect();
    v.push(&m.colours);
    if let Some(s) = &m.sheets {
        v.push(&s.extents);
        v.extend(&s.pictures);
    }
    v
}

/// One line of a record card.
#[derive(Debug, Clone, PartialEq)]
pub struct RecordLine {
    pub name: String,
    pub value: String,
    pub link: bool,
}

/// The neighbour lists of the chunks fetched so far, at most `budget` chunks, the least recently
/// used dropped first.
pub struct NeighbourChunks {
    pub k: usize,
    chunk_items: usize,
    n: usize,
    refs: Vec<vitrine_format::ArrayRef>,
    loaded: Vec<Option<Vec<u32>>>,
    last_used: Vec<u64>,
    tick: u64,
    budget: usize,
}

/// Neighbour chunks kept at once: 48 chunks of 16,384 lists of 15 are ~47 MB.
pub const NEIGHBOUR_CHUNK_BUDGET: usize = 48;

impl NeighbourChunks {
    pub fn new(m: &Manifest, budget: usize) -> NeighbourChunks {
        let nb = &m.neighbours;
        NeighbourChunks {
            k: nb.k as usize,
            chunk_items: nb.chunk_items.max(1) as usize,
            n: m.item_count as usize,
            refs: nb.chunks.iter().map(|c| c.ids.clone()).collect(),
            loaded: vec![None; nb.chunks.len()],
            last_used: vec![0; nb.chunks.len()],
            tick: 0,
            budget: budget.max(1),
        }
    }

    /// The chunk holding item `i`'s list, and its file and size.
    pub fn chunk_of(&self, i: usize) -> (usize, &str, u64) {
        let c = (i / self.chunk_items).min(self.refs.len().saturating_sub(1));
        (c, &self.refs[c].file, self.refs[c].bytes)
    }

    pub fn is_loaded(&self, c: usize) -> bool {
        self.loaded.get(c).is_some_and(|l| l.is_some())
    }

    /// How many chunks are held now.
    pub fn held(&self) -> usize {
        self.loaded.iter().filter(|l| l.is_some()).count()
    }

    /// Checks and keeps chunk `c` from its fetched bytes; drops the least recently used chunks
    /// beyond the budget (never `c` itself).
    pub fn insert(&mut self, c: usize, bytes: &[u8]) -> Result<(), AtlasError> {
        let r = self
            .refs
            .get(c)
            .ok_or_else(|| AtlasError::Inconsistent(format!("there is no neighbour chunk {c}")))?;
        let ids: Vec<u32> = r.decode(bytes)?;
        let items = (c * self.chunk_items).min(self.n)..((c + 1) * self.chunk_items).min(self.n);
        if ids.len() != items.len() * self.k {
            return Err(AtlasError::BadContent {
                file: r.file.clone(),
                reason: format!(
                    "{} entries for {} items of {}",
                    ids.len(),
                    items.len(),
                    self.k
                ),
            });
        }
        if let Some(bad) = ids.iter().find(|&&j| j != u32::MAX && j as usize >= self.n) {
            return Err(AtlasError::BadContent {
                file: r.file.clone(),
                reason: format!("item {bad} does not exist"),
            });
        }
        self.tick += 1;
        self.loaded[c] = Some(ids);
        self.last_used[c] = self.tick;
        while self.held() > self.budget {
            let oldest = (0..self.loaded.len())
                .filter(|&o| o != c && self.loaded[o].is_some())
                .min_by_key(|&o| self.last_used[o]);
            match oldest {
                Some(o) => self.loaded[o] = None,
                None => break,
            }
        }
        Ok(())
    }

    /// Item `i`'s neighbours, nearest first, or None while its chunk is not loaded.
    pub fn of(&mut self, i: usize) -> Option<Vec<usize>> {
        let (c, _, _) = self.chunk_of(i);
        let list = self.loaded.get(c)?.as_ref()?;
        let at = (i - c * self.chunk_items) * self.k;
        let out = list
            .get(at..at + self.k)?
            .iter()
            .filter(|&&j| j != u32::MAX)
            .map(|&j| j as usize)
            .collect();
        self.tick += 1;
        self.last_used[c] = self.tick;
        Some(out)
    }
}

impl AtlasData {
    /// Every array file the viewer fetches whole, with its declared size (the neighbour chunks are
    /// fetched one by one when needed, see [`NeighbourChunks`]).
    pub fn files(m: &Manifest) -> Vec<(String, u64)> {
        let chunked: std::collections::HashSet<&str> = m
            .neighbours
            .chunks
            .iter()
            .flat_map(|c| [c.ids.file.as_str(), c.distances.file.as_str()])
            // The compressed vectors too: fetched when a feature first needs them.
            .chain(
                m.vectors
                    .iter()
                    .flat_map(|v| v.chunks.iter().map(|c| c.file.as_str())),
            )
            .collect();
        let mut seen = std::collections::BTreeMap::new();
        for r in m.arrays() {
            if !chunked.contains(r.file.as_str()) {
                seen.insert(r.file.clone(), r.bytes);
            }
        }
        seen.into_iter().collect()
    }

    /// The arrays the first picture needs: every map's positions, the average colours, the
    /// thumbnail extents and the cluster numbers.
    pub fn first_files(m: &Manifest) -> Vec<(String, u64)> {
        let mut refs: Vec<&vitrine_format::ArrayRef> =
            m.maps.iter().map(|p| &p.positions).collect();
        refs.push(&m.colours);
        refs.extend(m.sheets.as_ref().map(|s| &s.extents));
        refs.extend(m.clusters.as_ref().map(|c| &c.ids));
        let mut seen = std::collections::BTreeMap::new();
        for r in refs {
            seen.insert(r.file.clone(), r.bytes);
        }
        seen.into_iter().collect()
    }

    /// The rest (ids, catalogue columns): fetched while the first picture is
    /// already on screen, then added with [`AtlasData::complete`].
    pub fn later_files(m: &Manifest) -> Vec<(String, u64)> {
        let first: std::collections::HashSet<String> =
            Self::first_files(m).into_iter().map(|(f, _)| f).collect();
        Self::files(m)
            .into_iter()
            .filter(|(f, _)| !first.contains(f))
            .collect()
    }

    /// The atlas from its manifest and fetched array files: at least the [`AtlasData::first_files`];
    /// when the [`AtlasData::later_files`] are there too, the catalogue is decoded as well.
    pub fn from_parts(manifest: Manifest, files: &AtlasFiles) -> Result<AtlasData, AtlasError> {
        let n = manifest.item_count as usize;
        if manifest.maps.is_empty() {
            return Err(AtlasError::Inconsistent("the atlas has no map".into()));
        }
        let mut maps = Vec::new();
        for map in &manifest.maps {
            let positions = files.positions(map)?;
            let w = (map.bounds[2] - map.bounds[0]).max(1e-6) as f64;
            let h = (map.bounds[3] - map.bounds[1]).max(1e-6) as f64;
            // Without two distinct positions, fall back to the side each item would have if items covered half the map.
            let spacing = crate::pick::typical_spacing(&positions)
                .unwrap_or_else(|| (w * h * 0.5 / n.max(1) as f64).sqrt());
            maps.push(MapView {
                name: map.name.clone(),
                description: map.description.clone(),
                positions,
                bounds: map.bounds,
                spacing,
                axis: map.x_axis.clone(),
            });
        }
        let colours = files.colours(&manifest)?;
        let extents = files.extents(&manifest)?.unwrap_or_else(|| vec![(0, 0); n]);
        let clusters = files.clusters(&manifest)?.unwrap_or_default();
        let later = Self::later_files(&manifest)
            .iter()
            .all(|(f, _)| files.contains(f));
        let mut atlas = AtlasData {
            clusters,
            spacing: maps[0].spacing,
            n,
            ids: TextTable::from_strings::<&str>(&[]),
            positions: maps[0].positions.clone(),
            bounds: maps[0].bounds,
            maps,
            current: 0,
            colours,
            fields: Vec::new(),
            neighbours: NeighbourChunks::new(&manifest, NEIGHBOUR_CHUNK_BUDGET),
            extents,
            manifest,
            catalogue: false,
            image_sizes: Vec::new(),
            copies: Default::default(),
            tiled: None,
            leaf_records: Default::default(),
        };
        if later {
            atlas.complete(files)?;
        }
        Ok(atlas)
    }

    /// A tiled atlas (format 3) before any of its leaves has arrived: the pyramid, no items'
    /// data yet.
    pub fn tiled(manifest: Manifest) -> Result<AtlasData, AtlasError> {
        // The items' drawing data take 20 bytes an item: more than this is not an atlas a tab holds.
        let n = usize::try_from(manifest.item_count)
            .ok()
            .filter(|&n| n <= MAX_TILED_ITEMS)
            .ok_or_else(|| {
                AtlasError::Inconsistent(format!(
                    "{} items: a viewer holds at most {MAX_TILED_ITEMS}",
                    manifest.item_count
                ))
            })?;
        let tiles = manifest
            .tiles
            .clone()
            .ok_or_else(|| AtlasError::Inconsistent("not a tiled atlas".into()))?;
        let map = manifest
            .maps
            .iter()
            .find(|m| m.name == tiles.map)
            .ok_or_else(|| AtlasError::Inconsistent(format!("no map {}", tiles.map)))?;
        let (w, h) = (
            (map.bounds[2] - map.bounds[0]).max(1e-6) as f64,
            (map.bounds[3] - map.bounds[1]).max(1e-6) as f64,
        );
        let spacing = if tiles.spacing > 0.0 {
            tiles.spacing
        } else {
            (w * h * 0.5 / n.max(1) as f64).sqrt()
        };
        let view = MapView {
            name: map.name.clone(),
            description: map.description.clone(),
            positions: Vec::new(),
            bounds: map.bounds,
            spacing,
            axis: map.x_axis.clone(),
        };
        Ok(AtlasData {
            n,
            ids: TextTable::from_strings::<&str>(&[]),
            positions: vec![[0.0; 2]; n],
            bounds: map.bounds,
            colours: vec![[0; 4]; n],
            fields: Vec::new(),
            neighbours: NeighbourChunks::new(&manifest, NEIGHBOUR_CHUNK_BUDGET),
            extents: vec![(0, 0); if manifest.sheets.is_some() { n } else { 0 }],
            spacing,
            maps: vec![view],
            current: 0,
            clusters: Vec::new(),
            catalogue: false,
            image_sizes: Vec::new(),
            copies: Default::default(),
            tiled: Some(crate::tiled::Tiled::new(tiles)),
            leaf_records: Default::default(),
            manifest,
        })
    }

    /// Whether item `i`'s place is known: always in an atlas fetched whole; in a tiled one, once
    /// its leaf has arrived.
    pub fn placed(&self, i: usize) -> bool {
        match &self.tiled {
            None => i < self.n,
            Some(t) => i < self.n && t.leaf_state[t.leaf_of(i)] == crate::tiled::Fetch::Here,
        }
    }

    /// The files of leaf `leaf`'s chunks of the [`leaf_arrays`].
    pub fn leaf_files(&self, leaf: usize) -> Vec<String> {
        leaf_arrays(&self.manifest)
            .into_iter()
            .map(|r| vitrine_format::tiles::chunk_file(&r.file, leaf))
            .collect()
    }

    /// Puts leaf `leaf`'s drawing data in place from its chunks (`files` holds them by name;
    /// `sums` each array's list of checksums under its sums file), each checked first; the leaf's
    /// pictures, when items share them, are returned for the sheets (each checked to name a cell
    /// every level has).
    pub fn insert_leaf(
        &mut self,
        leaf: usize,
        sums: &AtlasFiles,
        files: &AtlasFiles,
    ) -> Result<Vec<u32>, AtlasError> {
        let Some(t) = &self.tiled else {
            return Err(AtlasError::Inconsistent("not a tiled atlas".into()));
        };
        let [a, b] = t.runs[leaf];
        let (a, b) = (a as usize, b as usize);
        let m = &self.manifest;
        let tiles = m.tiles.as_ref().expect("a tiled atlas has tiles");
        let part = |r: &vitrine_format::ArrayRef, per_item: usize| -> Result<&[u8], AtlasError> {
            let c = tiles.chunked(&r.file).ok_or_else(|| {
                AtlasError::Inconsistent(format!("{} is not stored by leaf", r.file))
            })?;
            let sums = sums.bytes(&c.sums)?;
            c.sums.verify(sums)?;
            let file = vitrine_format::tiles::chunk_file(&r.file, leaf);
            let bytes = files.bytes(&vitrine_format::ArrayRef {
                file: file.clone(),
                ..r.clone()
            })?;
            let want = (b - a) * per_item * r.dtype.size() as usize;
            if bytes.len() != want {
                return Err(AtlasError::WrongLength {
                    file,
                    expected: want as u64,
                    found: bytes.len() as u64,
                });
            }
            vitrine_format::tiles::verify_part(&file, sums, leaf, bytes)?;
            Ok(bytes)
        };
        let map = m
            .maps
            .iter()
            .find(|p| p.name == tiles.map)
            .expect("checked");
        let xy = part(&map.positions, 2)?;
        let colours = part(&m.colours, 4)?;
        let extents = m.sheets.as_ref().map(|s| part(&s.extents, 1)).transpose()?;
        let pictures: Vec<u32> = match m.sheets.as_ref().and_then(|s| s.pictures.as_ref()) {
            Some(p) => part(p, 1)?
                .chunks_exact(4)
                .map(|c| u32::from_le_bytes([c[0], c[1], c[2], c[3]]))
                .collect(),
            None => Vec::new(),
        };
        if let Some(s) = &m.sheets {
            let cells = s
                .levels
                .iter()
                .map(|l| l.files.len() as u64 * l.columns as u64 * l.rows as u64)
                .min()
                .unwrap_or(0);
            if let Some(&p) = pictures.iter().find(|&&p| p as u64 >= cells) {
                return Err(AtlasError::Inconsistent(format!(
                    "leaf {leaf}: a picture in cell {p}, but the sheets hold {cells} cells"
                )));
            }
        }
        for (k, c) in xy.chunks_exact(8).enumerate() {
            let f = |o: usize| f32::from_le_bytes([c[o], c[o + 1], c[o + 2], c[o + 3]]);
            self.positions[a + k] = [f(0), f(4)];
        }
        for (k, c) in colours.chunks_exact(4).enumerate() {
            self.colours[a + k] = [c[0], c[1], c[2], c[3]];
        }
        if let Some(e) = extents {
            for (k, c) in e.chunks_exact(4).enumerate() {
                let v = u32::from_le_bytes([c[0], c[1], c[2], c[3]]);
                self.extents[a + k] = vitrine_format::unpack_extent(v);
            }
        }
        if let Some(t) = &mut self.tiled {
            t.leaf_state[leaf] = crate::tiled::Fetch::Here;
        }
        Ok(pictures)
    }

    /// A tiled atlas: the list of checksums and the leaf chunks of the array stored whole at `r`
    /// (the files a viewer fetches to have it whole).
    pub fn chunk_files(
        &self,
        r: &vitrine_format::ArrayRef,
    ) -> Option<(vitrine_format::ArrayRef, Vec<String>)> {
        let tiles = self.manifest.tiles.as_ref()?;
        let c = tiles.chunked(&r.file)?;
        let leaves = self.tiled.as_ref().map_or(0, |t| t.runs.len());
        let files = (0..leaves)
            .map(|leaf| vitrine_format::tiles::chunk_file(&r.file, leaf))
            .collect();
        Some((c.sums.clone(), files))
    }

    /// A tiled atlas: the array stored whole at `r`, joined from its leaf chunks in `files` and
    /// checked whole; when the whole is wrong, each chunk is checked against its sum (in `files`
    /// too) so that the error names the leaf at fault.
    pub fn join_chunks(
        &self,
        r: &vitrine_format::ArrayRef,
        files: &AtlasFiles,
    ) -> Result<Vec<u8>, AtlasError> {
        let (sums_ref, names) = self
            .chunk_files(r)
            .ok_or_else(|| AtlasError::Inconsistent(format!("{} is not stored by leaf", r.file)))?;
        let sums = files.bytes(&sums_ref)?;
        sums_ref.verify(sums)?;
        if sums.len() != 32 * names.len() {
            return Err(AtlasError::Inconsistent(format!(
                "{}: {} checksums for {} leaves",
                sums_ref.file,
                sums.len() / 32,
                names.len()
            )));
        }
        let layout = &self
            .manifest
            .tiles
            .as_ref()
            .expect("tiled")
            .chunked(&r.file)
            .expect("chunked")
            .layout;
        let mut parts = Vec::with_capacity(names.len());
        for f in &names {
            parts.push(files.get(f).ok_or_else(|| AtlasError::WrongLength {
                file: f.clone(),
                expected: 1,
                found: 0,
            })?);
        }
        let whole = vitrine_format::tiles::join(layout, &parts);
        if let Err(e) = r.verify(&whole) {
            for (leaf, (f, part)) in names.iter().zip(&parts).enumerate() {
                vitrine_format::tiles::verify_part(f, sums, leaf, part)?;
            }
            return Err(e);
        }
        Ok(whole)
    }

    /// A tiled atlas: the arrays of the catalogue records (ids, every field's arrays, cluster
    /// numbers), stored by leaf.
    pub fn record_arrays(&self) -> Vec<vitrine_format::ArrayRef> {
        let m = &self.manifest;
        let mut v = vec![m.ids.clone(), m.ids_text.clone()];
        for f in &m.fields {
            v.extend(
                vitrine_corpus::columns::field_arrays(f)
                    .into_iter()
                    .cloned(),
            );
        }
        v.extend(m.clusters.iter().map(|c| c.ids.clone()));
        v
    }

    /// A tiled atlas: leaf `leaf`'s records from its chunks of the [`AtlasData::record_arrays`]
    /// (in `files`; each array's list of checksums in `sums`), each chunk checked against its
    /// sum, decoded as a catalogue of the leaf's items.
    pub fn insert_records(
        &mut self,
        leaf: usize,
        sums: &AtlasFiles,
        files: &AtlasFiles,
    ) -> Result<(), AtlasError> {
        let Some(t) = &self.tiled else {
            return Err(AtlasError::Inconsistent("not a tiled atlas".into()));
        };
        let [a, b] = t.runs[leaf];
        let tiles = self
            .manifest
            .tiles
            .as_ref()
            .expect("a tiled atlas has tiles");
        // Each array's chunk declared as an array of its own, its checksum from the list.
        let part = |r: &vitrine_format::ArrayRef| -> Result<vitrine_format::ArrayRef, AtlasError> {
            let c = tiles.chunked(&r.file).ok_or_else(|| {
                AtlasError::Inconsistent(format!("{} is not stored by leaf", r.file))
            })?;
            let list = sums.bytes(&c.sums)?;
            c.sums.verify(list)?;
            let sum = list.get(32 * leaf..32 * leaf + 32).ok_or_else(|| {
                AtlasError::Inconsistent(format!("{}: no checksum for leaf {leaf}", c.sums.file))
            })?;
            let file = vitrine_format::tiles::chunk_file(&r.file, leaf);
            let len = files.get(&file).map_or(0, |b| b.len() as u64);
            Ok(vitrine_format::ArrayRef {
                file,
                dtype: r.dtype,
                count: len / r.dtype.size().max(1),
                bytes: len,
                sha256: sum.iter().map(|x| format!("{x:02x}")).collect(),
            })
        };
        let mut m = self.manifest.clone();
        m.item_count = b - a;
        let ids = files.text(&part(&m.ids)?, &part(&m.ids_text)?, b - a)?;
        let mut fields = Vec::new();
        for f in &self.manifest.fields {
            let mut g = f.clone();
            g.column = part(&f.column)?;
            g.column2 = f.column2.as_ref().map(&part).transpose()?;
            g.written = match &f.written {
                Some([x, y]) => Some([part(x)?, part(y)?]),
                None => None,
            };
            g.multi = match &f.multi {
                Some([x, y]) => Some([part(x)?, part(y)?]),
                None => None,
            };
            fields.push(vitrine_corpus::columns::decode_field(&m, &g, files)?);
        }
        let clusters = match &self.manifest.clusters {
            Some(c) => files.array::<u32>(&part(&c.ids)?)?,
            None => Vec::new(),
        };
        self.leaf_records.insert(
            leaf,
            LeafRecords {
                ids,
                fields,
                clusters,
            },
        );
        Ok(())
    }

    /// A tiled atlas: item `i`'s leaf's records, if here, and its place among them.
    fn leaf_record(&self, i: usize) -> Option<(&LeafRecords, usize)> {
        let t = self.tiled.as_ref()?;
        let leaf = t.leaf_of(i);
        let r = self.leaf_records.get(&leaf)?;
        Some((r, i - t.runs[leaf][0] as usize))
    }

    /// Whether item `i`'s record can be shown: the catalogue is here, or (tiled) its leaf's.
    pub fn has_record(&self, i: usize) -> bool {
        self.catalogue || self.leaf_record(i).is_some()
    }

    /// Whether catalogue field `name`'s column is here (every field once the catalogue is; in a
    /// tiled atlas, a field once its column has been fetched).
    pub fn has_field(&self, name: &str) -> bool {
        self.fields.iter().any(|f| f.field.name == name)
    }

    /// A tiled atlas: adds catalogue field `name` from its arrays, whole, in `files` (see
    /// [`AtlasData::join_chunks`]); the fields stay in catalogue order.
    pub fn add_field(&mut self, name: &str, files: &AtlasFiles) -> Result<(), AtlasError> {
        if self.has_field(name) {
            return Ok(());
        }
        let m = &self.manifest;
        let f = m
            .fields
            .iter()
            .find(|f| f.name == name)
            .ok_or_else(|| AtlasError::Inconsistent(format!("no field {name}")))?;
        let column = vitrine_corpus::columns::decode_field(m, f, files)?;
        let order = |n: &str| m.fields.iter().position(|f| f.name == n);
        let at = order(name);
        let k = self
            .fields
            .iter()
            .position(|c| order(&c.field.name) > at)
            .unwrap_or(self.fields.len());
        self.fields.insert(k, column);
        Ok(())
    }

    /// Adds the ids and catalogue columns from the [`AtlasData::later_files`].
    pub fn complete(&mut self, files: &AtlasFiles) -> Result<(), AtlasError> {
        let m = &self.manifest;
        let ids = files.ids(m)?;
        let fields = vitrine_corpus::columns::decode_fields(m, files)?;
        let image_sizes = files.image_sizes(m)?.unwrap_or_default();
        self.copies = files.copies(m)?.unwrap_or_default();
        self.image_sizes = image_sizes;
        self.ids = ids;
        self.fields = fields;
        self.catalogue = true;
        Ok(())
    }

    /// Makes map `i` the one drawn and picked.
    pub fn select_map(&mut self, i: usize) {
        if i < self.maps.len() && i != self.current {
            self.current = i;
            self.positions = self.maps[i].positions.clone();
            self.bounds = self.maps[i].bounds;
            self.spacing = self.maps[i].spacing;
        }
    }

    /// A short label for an item: its title-like text field, else its id.
    /// Item `i`'s id ("" until the catalogue is loaded).
    pub fn id(&self, i: usize) -> &str {
        if self.catalogue {
            self.ids.get(i)
        } else if let Some((r, k)) = self.leaf_record(i) {
            r.ids.get(k)
        } else {
            ""
        }
    }

    pub fn label(&self, i: usize) -> String {
        let (ids, fields, k) = match (self.catalogue, self.leaf_record(i)) {
            (true, _) => (&self.ids, &self.fields, i),
            (false, Some((r, k))) => (&r.ids, &r.fields, k),
            (false, None) if self.tiled.is_some() => return format!("item {}", i + 1),
            (false, None) => return format!("item {} (the catalogue is loading)", i + 1),
        };
        for f in fields {
            if let Column::Text(t) = &f.column {
                if f.field.name.to_lowercase().contains("title") && !t.get(k).is_empty() {
                    return t.get(k).to_string();
                }
            }
        }
        ids.get(k).to_string()
    }

    /// Every catalogue field of item `i`, as text, in catalogue order (the id first). The field the
    /// build added for copies is left out: the card lists the copies themselves.
    pub fn record(&self, i: usize) -> Vec<RecordLine> {
        let mut out = vec![RecordLine {
            name: "id".into(),
            value: self.id(i).into(),
            link: false,
        }];
        let added = self
            .manifest
            .copies
            .as_ref()
            .and_then(|c| c.field.as_deref());
        // A tiled atlas without its catalogue: the item's leaf's records.
        let (fields, clusters, k) = match (self.catalogue, self.leaf_record(i)) {
            (false, Some((r, k))) => (&r.fields, &r.clusters, k),
            _ => (&self.fields, &self.clusters, i),
        };
        for f in fields
            .iter()
            .filter(|f| Some(f.field.name.as_str()) != added)
        {
            let value = f.text(k);
            let link = f.field.kind == FieldKind::Link
                && (value.starts_with("https://") || value.starts_with("http://"));
            out.push(RecordLine {
                name: f.field.name.clone(),
                value,
                link,
            });
        }
        if let (Some(c), Some(&id)) = (&self.manifest.clusters, clusters.get(k)) {
            if let Some(info) = c.list.get(id as usize) {
                out.push(RecordLine {
                    name: "cluster".into(),
                    value: format!("{} ({} items)", info.label, info.size),
                    link: false,
                });
            }
        }
        out
    }

    /// The item's neighbours from the neighbour graph, nearest first; None while the chunk that
    /// holds them is not loaded.
    pub fn neighbours_of(&mut self, i: usize) -> Option<Vec<usize>> {
        self.neighbours.of(i)
    }
}

/// The "about this map" note: headings with (name, value) lines, from the manifest.
pub fn about(m: &Manifest) -> Vec<(String, Vec<(String, String)>)> {
    let mut out = Vec::new();
    let mut general = vec![("items".to_string(), m.item_count.to_string())];
    for l in &m.maps {
        general.push((format!("{} map", l.name), l.description.clone()));
    }
    general.push(("neighbour graph".into(), m.neighbours.describe()));
    out.push(("This map".to_string(), general));
    let names: &[(&str, &str)] = &[
        (
            "similarity_trustworthiness_at_10",
            "trustworthiness at k = 10",
        ),
        ("similarity_continuity_at_10", "continuity at k = 10"),
        ("quality_sample_items", "measured on (items)"),
        ("neighbour_recall", "neighbour recall"),
        (
            "neighbour_recall_before_widening",
            "neighbour recall before the lists were widened",
        ),
        ("clusters", "clusters (Louvain)"),
        (
            "lattice_trustworthiness_at_10",
            "lattice: trustworthiness at k = 10",
        ),
        ("lattice_continuity_at_10", "lattice: continuity at k = 10"),
        (
            "neighbour_recall_sample_items",
            "recall measured on (items)",
        ),
    ];
    let mut q = Vec::new();
    for (key, value) in &m.quality {
        let label = names
            .iter()
            .find(|(k, _)| k == key)
            .map(|(_, l)| l.to_string())
            .unwrap_or_else(|| key.clone());
        let text = match value.as_f64() {
            Some(x) if x.fract() != 0.0 => format!("{x:.3}"),
            _ => value.to_string(),
        };
        q.push((label, text));
    }
    if !q.is_empty() {
        out.push(("Quality (1 = neighbourhoods fully kept)".to_string(), q));
    }
    if let Some(c) = &m.clusters {
        let mut lines = vec![("method".to_string(), c.method.clone())];
        lines.extend(cluster_lines(&c.list));
        out.push(("Clusters, largest first".to_string(), lines));
    }
    let p = &m.provenance;
    let mut prov = vec![(
        "built by".to_string(),
        format!("{} {}, seed {}", p.tool, p.tool_version, p.seed),
    )];
    for i in &p.inputs {
        prov.push((
            i.role.clone(),
            format!("{} ({} bytes) sha256 {}", i.path, i.bytes, i.sha256),
        ));
    }
    for (k, v) in &p.parameters {
        prov.push((k.clone(), v.to_string()));
    }
    out.push(("Provenance".to_string(), prov));
    out
}

/// Clusters shown by name in the about note; the rest are summed in one line.
pub const ABOUT_CLUSTERS: usize = 40;

/// One line per cluster, largest first: its label, its size and what makes it stand out
/// (each over-represented value's share in the cluster and how many times its share in the
/// whole collection that is).
fn cluster_lines(list: &[vitrine_format::ClusterInfo]) -> Vec<(String, String)> {
    let mut order: Vec<usize> = (0..list.len()).collect();
    order.sort_by(|&a, &b| list[b].size.cmp(&list[a].size).then(a.cmp(&b)));
    let mut lines: Vec<(String, String)> = order
        .iter()
        .take(ABOUT_CLUSTERS)
        .map(|&i| {
            // The size goes in the (narrow) name column, the label and its figures beside it.
            let c = &list[i];
            let mut text = c.label.clone();
            for t in &c.terms {
                text.push_str(&format!(
                    "; {} = {}: {:.0} % here, {:.1}x the collection",
                    t.field,
                    t.value,
                    100.0 * t.share,
                    t.lift
                ));
            }
            (format!("{} items", c.size), text)
        })
        .collect();
    if list.len() > ABOUT_CLUSTERS {
        let rest = &order[ABOUT_CLUSTERS..];
        let items: u64 = rest.iter().map(|&i| list[i].size).sum();
        lines.push((
            format!("{items} items"),
            format!("in {} smaller clusters", rest.len()),
        ));
    }
    lines
}

/// Axis ticks for the visible x range [x0, x1] of a map with a quantity axis: (x, label) pairs at a
/// round step chosen so that at most twelve ticks show.
pub fn axis_ticks(axis: &vitrine_format::MapAxis, x0: f64, x1: f64) -> Vec<(f64, String)> {
    let v0 = axis.origin + x0 * axis.units_per_map_unit;
    let v1 = axis.origin + x1 * axis.units_per_map_unit;
    let span = (v1 - v0).abs().max(1e-9);
    let step = [
        1.0, 2.0, 5.0, 10.0, 20.0, 25.0, 50.0, 100.0, 200.0, 250.0, 500.0, 1000.0, 2000.0, 5000.0,
    ]
    .into_iter()
    .find(|s| span / s <= 12.0)
    .unwrap_or(10_000.0);
    let mut out = Vec::new();
    let mut v = (v0.min(v1) / step).ceil() * step;
    while v <= v0.max(v1) && out.len() < 50 {
        out.push(((v - axis.origin) / axis.units_per_map_unit, format!("{v}")));
        v += step;
    }
    out
}

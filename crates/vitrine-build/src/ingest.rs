//! The user's files read, matched and checked before any computing: vectors, their ids, the
//! catalogue, each item's image file. Every error names the file and the row, id or field.

use std::collections::HashMap;
use std::path::{Path, PathBuf};

use anyhow::{bail, Result};
use vitrine_format::YearRange;
use vitrine_map::matrix::Matrix;

use crate::catalogue::{self, Catalogue};
use crate::error::{id_list, InputError};
use crate::options::BuildOptions;
use crate::progress::Progress;
use crate::report::Laps;

pub const IMAGE_EXTENSIONS: &[&str] = &[
    "jpg", "jpeg", "png", "tif", "tiff", "webp", "gif", "bmp", "jp2", "jpx", "j2k", "j2c",
];

/// A date field's name and each item's dating (None: undated).
pub type Datings = (String, Vec<Option<YearRange>>);

/// The user's files but the vectors, read, matched and checked.
pub struct Inputs {
    pub catalogue: Option<Catalogue>,
    pub items: Items,
    /// Each item's image file, or why it has none (None: the build has no --images).
    pub image_paths: Option<Vec<Result<PathBuf, String>>>,
    /// How the vectors were computed from the pictures (None: they were read from a file).
    pub described: Option<crate::from_images::Described>,
    /// What an IIIF source adds: its document for the provenance, notes for the report, and each
    /// item's Canvas size.
    pub iiif: Option<IiifUsed>,
}

/// An IIIF source as the build used it.
pub struct IiifUsed {
    /// The top document (address, length, SHA-256).
    pub document: (String, u64, String),
    pub notes: Vec<String>,
    /// Each item's Canvas size (width, height; 0, 0 unknown), item order.
    pub sizes: Vec<[u32; 2]>,
}

/// Reads and checks every input of `opts`: the vectors, one row an item, and the rest (the lap
/// "read inputs" ends once they are matched). Without a vectors file, the items are the
/// catalogue's records (or, without a catalogue, the image files) and their vectors are computed
/// from their pictures.
pub fn read(
    opts: &BuildOptions,
    iiif: Option<crate::iiif::Source>,
    progress: &dyn Progress,
    laps: &mut Laps,
) -> Result<(Matrix, Inputs)> {
    let file = match &opts.vectors {
        Some(path) => Some(read_vectors(path, opts, progress)?),
        None => None,
    };
    // An IIIF source's records, pictures and Canvas sizes, by catalogue row.
    let (iiif_cat, iiif_rows) = match iiif {
        Some(s) => (
            Some(s.catalogue),
            Some((s.paths, s.sizes, s.document, s.notes)),
        ),
        None => (None, None),
    };
    let cat = match &opts.catalogue {
        Some(p) => {
            let c = catalogue::read_table(p, &opts.id_column, opts.catalogue_format.clone())?;
            let how = |found: bool| if found { "found" } else { "as given" };
            if let Some(sheet) = &c.read_as.sheet {
                progress.note(&format!(
                    "catalogue: {} records, {} columns from {} (sheet {sheet:?})",
                    c.rows.len(),
                    c.header.len(),
                    p.display()
                ));
            } else {
                progress.note(&format!(
                    "catalogue: {} records, {} columns from {} (separated by {}, {}; {} text, {})",
                    c.rows.len(),
                    c.header.len(),
                    p.display(),
                    c.read_as.delimiter_name(),
                    how(c.read_as.found.0),
                    c.read_as.encoding.name(),
                    how(c.read_as.found.1)
                ));
            }
            Some(c)
        }
        None => iiif_cat,
    };
    // A misspelt --date-field is said now, not after hours of computing.
    if let (Some(c), Some(name)) = (&cat, &opts.date_field) {
        date_column(c, name)?;
    }
    let named = opts
        .multi_valued
        .iter()
        .map(|(f, _)| (f, "--multi-valued"))
        .chain(opts.single_valued.iter().map(|f| (f, "--single-valued")));
    for (name, flag) in named {
        match &cat {
            Some(c) if c.column(name).is_some() => {}
            Some(c) => {
                return Err(InputError::Usage(format!(
                    "{flag} {name:?}: the catalogue has no such column (it has {})",
                    c.header.join(", ")
                ))
                .into())
            }
            None => {
                return Err(InputError::Usage(format!("{flag} {name:?} needs a catalogue")).into())
            }
        }
    }
    let Some((vectors, file_ids)) = file else {
        let dir = opts
            .images
            .as_ref()
            .expect("options without vectors have images (checked)");
        let (items, paths) = match &iiif_rows {
            Some((paths, ..)) => {
                let ids: Vec<String> = cat
                    .as_ref()
                    .expect("an IIIF source gives a catalogue")
                    .ids()
                    .map(String::from)
                    .collect();
                let rows = (0..ids.len()).collect();
                (
                    Items {
                        ids,
                        catalogue_rows: Some(rows),
                    },
                    paths.clone(),
                )
            }
            None => items_from_images(
                dir,
                cat.as_ref(),
                opts.image_column.as_deref(),
                &[Some(&opts.out), opts.thumb_cache.as_ref()],
            )?,
        };
        laps.lap("read inputs");
        let (vectors, described) = crate::from_images::compute(opts, &paths, progress)?;
        laps.lap("vectors from images");
        let iiif = iiif_used(iiif_rows, &items);
        return Ok((
            vectors,
            Inputs {
                catalogue: cat,
                items,
                image_paths: Some(paths),
                described: Some(described),
                iiif,
            },
        ));
    };
    let vfile = opts.vectors.as_deref().expect("read from a file");
    let items = match_items(vectors.rows, vfile, opts, cat.as_ref(), file_ids)?;
    laps.lap("read inputs");
    check_finite(&vectors, &items.ids, vfile)?;
    if vectors.rows == 0 {
        bail!("{}: there are no vectors", vfile.display());
    }
    let image_paths = match (&opts.images, &iiif_rows) {
        (_, Some((paths, ..))) => Some(
            items
                .catalogue_rows
                .as_ref()
                .expect("an IIIF source gives a catalogue")
                .iter()
                .map(|&r| paths[r].clone())
                .collect(),
        ),
        (Some(dir), None) => Some(find_images(
            dir,
            &items.ids,
            cat.as_ref(),
            items.catalogue_rows.as_deref(),
            opts.image_column.as_deref(),
        )?),
        (None, None) => None,
    };
    let iiif = iiif_used(iiif_rows, &items);
    Ok((
        vectors,
        Inputs {
            catalogue: cat,
            items,
            image_paths,
            described: None,
            iiif,
        },
    ))
}

type IiifRows = (
    Vec<std::result::Result<PathBuf, String>>,
    Vec<[u32; 2]>,
    (String, u64, String),
    Vec<String>,
);

/// What the rest of the build keeps of an IIIF source, the Canvas sizes in item order.
fn iiif_used(rows: Option<IiifRows>, items: &Items) -> Option<IiifUsed> {
    let (_, sizes, document, notes) = rows?;
    let sizes = match &items.catalogue_rows {
        Some(r) => r.iter().map(|&r| sizes[r]).collect(),
        None => vec![[0, 0]; items.ids.len()],
    };
    Some(IiifUsed {
        document,
        notes,
        sizes,
    })
}

/// The vectors file and the ids it holds (if any).
fn read_vectors(
    path: &Path,
    opts: &BuildOptions,
    progress: &dyn Progress,
) -> Result<(Matrix, Option<Vec<String>>)> {
    let file = crate::vectors::read_vector_file(path, opts.vectors_key.as_deref())?;
    progress.note(&format!(
        "vectors: {} x {} from {}{}{}",
        file.matrix.rows,
        file.matrix.cols,
        path.display(),
        file.array
            .as_ref()
            .map(|a| format!(" (array {a:?})"))
            .unwrap_or_default(),
        if file.ids.is_some() {
            ", with their ids"
        } else {
            ""
        }
    ));
    if file.ids.is_some() && opts.vector_ids.is_some() {
        bail!(
            "{} holds its vectors' ids (an array \"ids\"); leave out --vector-ids",
            path.display()
        );
    }
    Ok((file.matrix, file.ids))
}

/// Items when there are no vectors: the catalogue's records in order, each with the image
/// [`find_images`] finds for it; without a catalogue, every image file below `dir` (sorted), its
/// id the path inside `dir` without the extension (with it, where two files differ only by it).
fn items_from_images(
    dir: &Path,
    cat: Option<&Catalogue>,
    image_column: Option<&str>,
    not_inside: &[Option<&PathBuf>],
) -> Result<(Items, Vec<Result<PathBuf, String>>), InputError> {
    if let Some(cat) = cat {
        let ids: Vec<String> = cat.ids().map(String::from).collect();
        if ids.is_empty() {
            return Err(InputError::Usage(format!(
                "{}: the catalogue has no records",
                cat.file
            )));
        }
        let rows: Vec<usize> = (0..ids.len()).collect();
        let paths = find_images(dir, &ids, Some(cat), Some(&rows), image_column)?;
        return Ok((
            Items {
                ids,
                catalogue_rows: Some(rows),
            },
            paths,
        ));
    }
    if image_column.is_some() {
        return Err(InputError::Usage("--image-column needs --catalogue".into()));
    }
    if !dir.is_dir() {
        return Err(InputError::Usage(format!(
            "--images {}: not a folder",
            dir.display()
        )));
    }
    // Pictures only: not the files of an atlas (a folder with an atlas.json: this build's --out or
    // an earlier one, and the temporary folders beside them) nor of the thumbnail cache.
    let skip: Vec<PathBuf> = not_inside
        .iter()
        .flatten()
        .filter_map(|p| std::fs::canonicalize(p).ok())
        .collect();
    let mut atlas_dirs = std::collections::HashSet::new();
    let files: Vec<PathBuf> = walk(dir)
        .into_iter()
        .filter(|p| {
            if p.file_name()
                .is_some_and(|n| n == vitrine_format::MANIFEST_FILE)
            {
                if let Some(parent) = p.parent() {
                    atlas_dirs.insert(parent.to_path_buf());
                }
            }
            IMAGE_EXTENSIONS.contains(&crate::folder::lower_extension(p).as_str())
        })
        .collect();
    let files: Vec<PathBuf> = files
        .into_iter()
        .filter(|p| {
            let in_atlas = p.ancestors().skip(1).any(|a| atlas_dirs.contains(a));
            let in_skipped = std::fs::canonicalize(p)
                .map(|c| skip.iter().any(|s| c.starts_with(s)))
                .unwrap_or(false);
            !in_atlas && !in_skipped
        })
        .collect();
    if files.is_empty() {
        return Err(InputError::Usage(format!(
            "--images {}: no image files in it (read are {})",
            dir.display(),
            IMAGE_EXTENSIONS.join(", ")
        )));
    }
    let inside = |p: &Path| {
        p.strip_prefix(dir)
            .unwrap_or(p)
            .components()
            .map(|c| c.as_os_str().to_string_lossy())
            .collect::<Vec<_>>()
            .join("/")
    };
    // Ids: the path without its extension, or with it while any id is still claimed twice (the
    // full paths differ, so this ends).
    let mut ids: Vec<String> = files
        .iter()
        .map(|p| inside(&p.with_extension("")))
        .collect();
    loop {
        let mut count: HashMap<&str, usize> = HashMap::new();
        for s in &ids {
            *count.entry(s.as_str()).or_default() += 1;
        }
        let twice: Vec<usize> = (0..ids.len())
            .filter(|&i| count[ids[i].as_str()] > 1 && ids[i] != inside(&files[i]))
            .collect();
        if twice.is_empty() {
            break;
        }
        for i in twice {
            ids[i] = inside(&files[i]);
        }
    }
    crate::vectors::check_ids(&ids).map_err(|e| {
        InputError::Usage(format!(
            "--images {}: the image files' names give ids that cannot be told apart ({e}; names that are not UTF-8 text read alike)",
            dir.display()
        ))
    })?;
    Ok((
        Items {
            ids,
            catalogue_rows: None,
        },
        files.into_iter().map(Ok).collect(),
    ))
}

/// The catalogue column `--date-field` names.
fn date_column(cat: &Catalogue, name: &str) -> Result<usize, InputError> {
    cat.column(name).ok_or_else(|| {
        InputError::Usage(format!(
            "--date-field {name:?}: the catalogue has no such column"
        ))
    })
}

impl Inputs {
    /// The catalogue date field that orders the timeline map: `--date-field`, else the first
    /// column read as dates; with each item's dating. None when there is no catalogue or no date field.
    pub fn datings(&self, date_field: Option<&str>) -> Result<Option<Datings>, InputError> {
        let (Some(cat), Some(rows)) = (&self.catalogue, &self.items.catalogue_rows) else {
            return Ok(None);
        };
        let chosen = match date_field {
            Some(name) => Some(date_column(cat, name)?),
            None => (0..cat.header.len())
                .filter(|&c| c != cat.id_column)
                .find(|&c| {
                    let values: Vec<&str> = rows.iter().map(|&r| cat.rows[r][c].as_str()).collect();
                    catalogue::infer_kind(&cat.header[c], &values)
                        == vitrine_format::FieldKind::Date
                }),
        };
        Ok(chosen.map(|c| {
            let ranges = rows
                .iter()
                .map(|&r| crate::dates::parse_date(&cat.rows[r][c]))
                .collect();
            (cat.header[c].clone(), ranges)
        }))
    }
}

/// Items as the build sees them: vector rows, their ids and their catalogue rows.
pub struct Items {
    pub ids: Vec<String>,
    /// Catalogue row for each vector row.
    pub catalogue_rows: Option<Vec<usize>>,
}

fn read_id_list(path: &Path) -> Result<Vec<String>, InputError> {
    let text = std::fs::read_to_string(path).map_err(|e| InputError::io(path, e))?;
    let text = text.strip_prefix('\u{feff}').unwrap_or(&text);
    let ids: Vec<String> = text.lines().map(|l| l.trim().to_string()).collect();
    let ids: Vec<String> = match ids.iter().rposition(|l| !l.is_empty()) {
        Some(last) => ids[..=last].to_vec(),
        None => vec![],
    };
    let mut seen = HashMap::new();
    for (i, id) in ids.iter().enumerate() {
        if id.is_empty() {
            return Err(InputError::Vectors {
                file: path.display().to_string(),
                reason: format!("line {} is an empty id", i + 1),
            });
        }
        if let Some(j) = seen.insert(id.clone(), i) {
            return Err(InputError::Vectors {
                file: path.display().to_string(),
                reason: format!(
                    "the id {id:?} appears twice (lines {} and {})",
                    j + 1,
                    i + 1
                ),
            });
        }
    }
    Ok(ids)
}

fn match_items(
    rows: usize,
    vectors_file: &Path,
    opts: &BuildOptions,
    cat: Option<&Catalogue>,
    file_ids: Option<Vec<String>>,
) -> Result<Items, InputError> {
    let vfile = vectors_file.display().to_string();
    let vector_ids = match &opts.vector_ids {
        None if file_ids.is_some() => file_ids,
        Some(p) => {
            let ids = read_id_list(p)?;
            if ids.len() != rows {
                return Err(InputError::Matching(format!(
                    "{} lists {} ids but {vfile} has {} rows",
                    p.display(),
                    ids.len(),
                    rows
                )));
            }
            Some(ids)
        }
        None => None,
    };
    let Some(cat) = cat else {
        let ids = vector_ids.unwrap_or_else(|| (0..rows).map(|i| i.to_string()).collect());
        return Ok(Items {
            ids,
            catalogue_rows: None,
        });
    };
    match vector_ids {
        Some(vids) => {
            let by_id: HashMap<&str, usize> =
                cat.ids().enumerate().map(|(i, id)| (id, i)).collect();
            let vset: std::collections::HashSet<&str> = vids.iter().map(String::as_str).collect();
            let no_vector: Vec<String> = cat
                .ids()
                .filter(|id| !vset.contains(id))
                .map(String::from)
                .collect();
            let no_record: Vec<String> = vids
                .iter()
                .filter(|id| !by_id.contains_key(id.as_str()))
                .cloned()
                .collect();
            let mut msg = Vec::new();
            if !no_vector.is_empty() {
                msg.push(format!(
                    "{} catalogue record(s) in {} have no vector: {}",
                    no_vector.len(),
                    cat.file,
                    id_list(&no_vector)
                ));
            }
            if !no_record.is_empty() {
                msg.push(format!(
                    "{} vector(s) in {vfile} have no catalogue record: {}",
                    no_record.len(),
                    id_list(&no_record)
                ));
            }
            if !msg.is_empty() {
                return Err(InputError::Matching(msg.join("\n")));
            }
            let rows = vids.iter().map(|id| by_id[id.as_str()]).collect();
            Ok(Items {
                ids: vids,
                catalogue_rows: Some(rows),
            })
        }
        None => {
            let ids: Vec<String> = cat.ids().map(String::from).collect();
            if ids.len() != rows {
                let detail = if ids.len() > rows {
                    format!(
                        "catalogue record(s) with no vector: {}",
                        id_list(&ids[rows..])
                    )
                } else {
                    format!(
                        "vector rows {}..{} have no catalogue record",
                        ids.len(),
                        rows - 1
                    )
                };
                return Err(InputError::Matching(format!(
                    "{} has {} records but {vfile} has {} rows; without --vector-ids they are matched in order. {detail}",
                    cat.file,
                    ids.len(),
                    rows
                )));
            }
            Ok(Items {
                ids,
                catalogue_rows: Some((0..rows).collect()),
            })
        }
    }
}

fn check_finite(vectors: &Matrix, ids: &[String], file: &Path) -> Result<(), InputError> {
    let bad: Vec<String> = (0..vectors.rows)
        .filter(|&i| vectors.row(i).iter().any(|x| !x.is_finite()))
        .map(|i| format!("row {i} (id {})", ids[i]))
        .collect();
    if bad.is_empty() {
        return Ok(());
    }
    Err(InputError::Vectors {
        file: file.display().to_string(),
        reason: format!(
            "{} row(s) hold NaN or infinite values: {}",
            bad.len(),
            id_list(&bad)
        ),
    })
}

/// Finds each item's image: the image column's relative path, or a file named id + an image extension.
fn find_images(
    dir: &Path,
    ids: &[String],
    cat: Option<&Catalogue>,
    cat_rows: Option<&[usize]>,
    image_column: Option<&str>,
) -> Result<Vec<Result<PathBuf, String>>, InputError> {
    if !dir.is_dir() {
        return Err(InputError::Usage(format!(
            "--images {}: not a folder",
            dir.display()
        )));
    }
    let column = match (cat, image_column) {
        (Some(c), Some(name)) => Some(c.column(name).ok_or_else(|| {
            InputError::Usage(format!(
                "--image-column {name:?}: the catalogue has no such column"
            ))
        })?),
        (Some(c), None) => ["image", "image_path", "file", "filename"]
            .iter()
            .find_map(|n| c.column(n)),
        (None, Some(_)) => {
            return Err(InputError::Usage("--image-column needs --catalogue".into()))
        }
        (None, None) => None,
    };
    // A file is found by its name without the extension, or by its path inside the folder with
    // or without the extension (the ids a build from the folder alone gives, kept with
    // --save-vectors).
    let mut by_stem: HashMap<String, PathBuf> = HashMap::new();
    let mut by_path: HashMap<String, PathBuf> = HashMap::new();
    if column.is_none() {
        for entry in walk(dir) {
            let ext = crate::folder::lower_extension(&entry);
            if IMAGE_EXTENSIONS.contains(&ext.as_str()) {
                if let Some(stem) = entry.file_stem().and_then(|s| s.to_str()) {
                    by_stem.entry(stem.to_string()).or_insert(entry.clone());
                }
                let rel: Vec<String> = entry
                    .strip_prefix(dir)
                    .unwrap_or(&entry)
                    .components()
                    .map(|c| c.as_os_str().to_string_lossy().to_string())
                    .collect();
                let rel = rel.join("/");
                by_path
                    .entry(
                        rel.rsplit_once('.')
                            .map_or(rel.clone(), |(a, _)| a.to_string()),
                    )
                    .or_insert(entry.clone());
                by_path.insert(rel, entry.clone());
            }
        }
    }
    Ok(ids
        .iter()
        .enumerate()
        .map(|(i, id)| match (column, cat, cat_rows) {
            (Some(c), Some(cat), Some(rows)) => {
                let rel = cat.rows[rows[i]][c].trim();
                if rel.is_empty() {
                    return Err(format!(
                        "the catalogue's {:?} field is empty",
                        cat.header[c]
                    ));
                }
                let inside = Path::new(rel).components().all(|p| {
                    matches!(
                        p,
                        std::path::Component::Normal(_) | std::path::Component::CurDir
                    )
                });
                if !inside {
                    return Err(format!(
                        "the path {rel:?} leads outside the --images folder; it was not read"
                    ));
                }
                Ok(dir.join(rel))
            }
            _ => by_path
                .get(id)
                .or_else(|| by_stem.get(id))
                .cloned()
                .ok_or_else(|| {
                    format!("no file named {id} with an image extension in the --images folder")
                }),
        })
        .collect())
}

/// Every file below `dir`, sorted (folders that cannot be read are passed over). Links to folders
/// are followed, each folder once: a folder reached again (a link to a parent, two links to one
/// folder) is passed over, so links in a loop end the walk instead of sending it on forever.
pub fn walk(dir: &Path) -> Vec<PathBuf> {
    let mut out = Vec::new();
    let mut seen = std::collections::HashSet::new();
    let mut stack = vec![dir.to_path_buf()];
    while let Some(d) = stack.pop() {
        if !seen.insert(folder_identity(&d)) {
            continue;
        }
        let Ok(rd) = std::fs::read_dir(&d) else {
            continue;
        };
        let mut entries: Vec<PathBuf> = rd.filter_map(|e| e.ok().map(|e| e.path())).collect();
        entries.sort();
        for p in entries {
            if p.is_dir() {
                stack.push(p);
            } else {
                out.push(p);
            }
        }
    }
    out.sort();
    out
}

/// What makes a folder the same folder however it is reached: its device and inode on Unix,
/// its canonical path elsewhere.
#[cfg(unix)]
fn folder_identity(d: &Path) -> (u64, u64, PathBuf) {
    use std::os::unix::fs::MetadataExt;
    match std::fs::metadata(d) {
        Ok(m) => (m.dev(), m.ino(), PathBuf::new()),
        Err(_) => (0, 0, d.to_path_buf()),
    }
}

#[cfg(not(unix))]
fn folder_identity(d: &Path) -> (u64, u64, PathBuf) {
    (
        0,
        0,
        std::fs::canonicalize(d).unwrap_or_else(|_| d.to_path_buf()),
    )
}

//! The invented demo archive: a seeded generator of pictures in fourteen visual families, a catalogue
//! of invented workshops, places and datings, and feature vectors computed from the pictures.
//! Every name here is made up.

pub mod draw;
pub mod features;

use std::path::Path;

use rayon::prelude::*;
use vitrine_corpus::export::csv_row;
use vitrine_map::rng::Rng;

pub const WORKSHOPS: [&str; 14] = [
    "Workshop of the Grey Heron",
    "Lantern Lane Press",
    "Atelier of the Twin Keys",
    "Hollow Oak Bindery",
    "Saltmarsh Engravers",
    "House of the Copper Finch",
    "The Quiet Mill",
    "Tallow Stair Workshop",
    "Marrowgate Studio",
    "Thistlecombe Press",
    "House of the Blue Door",
    "Vantmoor Guild",
    "Orrin Street Atelier",
    "Cinderwell Yard",
];
pub const PLACES: [&str; 10] = [
    "Veldmark",
    "Calvessa",
    "Brunholt",
    "Orvennac",
    "Lindqvara",
    "Pellucine",
    "Sarnwick",
    "Tormaline",
    "Dunmirelle",
    "Quillmere",
];
pub const TECHNIQUES: [&str; 9] = [
    "etching",
    "engraving",
    "woodcut",
    "pen and ink",
    "red chalk",
    "watercolour",
    "gouache",
    "albumen print",
    "lithograph",
];
const SUBJECTS: [&str; 14] = [
    "figure",
    "ornament",
    "ornament",
    "landscape",
    "landscape",
    "botany",
    "architecture",
    "figure",
    "textile",
    "textile",
    "cartography",
    "heraldry",
    "object",
    "script",
];
const ROMAN: [&str; 8] = ["I", "II", "III", "IV", "V", "VI", "VII", "VIII"];

pub struct Record {
    pub id: String,
    pub family: usize,
    pub fields: Vec<String>,
}

pub const HEADER: [&str; 13] = [
    "id",
    "title",
    "workshop",
    "place",
    "technique",
    "subject",
    "dating",
    "height_cm",
    "width_cm",
    "shelf_mark",
    "image",
    "record",
    "keywords",
];

/// Index keywords per family (an invented indexing vocabulary), several per record.
const KEYWORDS: [[&str; 4]; 14] = [
    ["figure", "gesture", "study", "drapery"],
    ["ornament", "rosette", "ceiling", "design"],
    ["ornament", "border", "pattern", "design"],
    ["landscape", "hills", "view", "study"],
    ["landscape", "coast", "ship", "view"],
    ["tree", "nature study", "foliage", "study"],
    ["architecture", "arcade", "view", "design"],
    ["portrait", "figure", "costume", "profile"],
    ["textile", "pattern", "weaving", "design"],
    ["textile", "marbling", "pattern", "bookbinding"],
    ["cartography", "sky", "stars", "chart"],
    ["heraldry", "device", "lettering", "emblem"],
    ["vessel", "profile", "metalwork", "design"],
    ["lettering", "calligraphy", "flourish", "pattern"],
];

/// The catalogue record of item `i`: its family's workshops, places and period shape every field.
pub fn record(i: usize, family: usize, rng: &mut Rng, w: u32, h: u32) -> Record {
    let id = format!("rec-{:06}", i + 1);
    let pick = |rng: &mut Rng, n: usize| rng.below(n as u64) as usize;
    // Each family has two house workshops and a period; a few sheets come from elsewhere.
    let workshop = if rng.uniform() < 0.85 {
        WORKSHOPS[(family + pick(rng, 2) * 7) % WORKSHOPS.len()]
    } else {
        WORKSHOPS[pick(rng, WORKSHOPS.len())]
    };
    let place = PLACES[(family * 3 + pick(rng, 3)) % PLACES.len()];
    let technique = TECHNIQUES[(family * 2 + pick(rng, 3)) % TECHNIQUES.len()];
    let start = 1460 + ((family * 53) % 260) as i32;
    let year = start + (rng.uniform() * 90.0) as i32;
    let dating = match pick(rng, 20) {
        0..=6 => format!("{year}"),
        7..=10 => format!("c. {year}"),
        11..=13 => format!("{}-{}", year, year + 5 + pick(rng, 30) as i32),
        // An abbreviated range takes an en dash (with a hyphen, 1598-03 is an ISO year and month).
        14 => format!("{}–{:02}", year, (year + 3 + pick(rng, 6) as i32) % 100),
        15 => format!("{}0s", year / 10),
        16 => format!("before {}", year + 10),
        17 => {
            let c = year / 100 + 1;
            let part = ["early", "mid", "late"][((year % 100) / 34) as usize];
            format!("{part} {c}th century")
        }
        18 => format!("ca. {year}"),
        _ => String::new(),
    };
    let subject = draw::FAMILIES[family];
    let title = match family {
        0 => format!(
            "Standing figure with raised arm, study {}",
            ROMAN[pick(rng, 8)]
        ),
        1 => format!(
            "Rosette, design for {} work",
            ["ceiling", "inlay", "plaster", "glass"][pick(rng, 4)]
        ),
        2 => format!(
            "Border band with stepped motif, sheet {}",
            1 + pick(rng, 40)
        ),
        3 => format!("Hills near {place}"),
        4 => format!(
            "Coast at {place}{}",
            if rng.uniform() < 0.5 {
                " with a sail"
            } else {
                ""
            }
        ),
        5 => format!(
            "{} tree, study from nature",
            ["Oak", "Alder", "Linden", "Ash", "Walnut"][pick(rng, 5)]
        ),
        6 => format!(
            "Arcade of the {} at {place}",
            ["market hall", "hospital", "guild house", "cloister"][pick(rng, 4)]
        ),
        7 => format!(
            "Portrait of a {}",
            ["young woman", "merchant", "scholar", "child", "cleric"][pick(rng, 5)]
        ),
        8 => format!("Woven check, pattern {}", 100 + pick(rng, 800)),
        9 => format!(
            "Marbled endpaper, {} pattern",
            ["comb", "stone", "wave", "peacock"][pick(rng, 4)]
        ),
        10 => format!(
            "Chart of the {} sky",
            ["northern", "southern", "winter", "summer"][pick(rng, 4)]
        ),
        11 => format!(
            "Device of the {} of {place}",
            ["guild", "council", "brotherhood", "house"][pick(rng, 4)]
        ),
        12 => format!(
            "{} in profile",
            ["Ewer", "Amphora", "Jug", "Flask", "Urn"][pick(rng, 5)]
        ),
        _ => format!("Writing-master's flourish, plate {}", 1 + pick(rng, 60)),
    };
    let scale = 0.08 + rng.uniform() * 0.1;
    let fields = vec![
        id.clone(),
        title,
        workshop.to_string(),
        place.to_string(),
        technique.to_string(),
        SUBJECTS[family].to_string(),
        dating,
        format!("{:.1}", h as f64 * scale),
        format!("{:.1}", w as f64 * scale),
        format!(
            "Drawer {}, sheet {}",
            1 + family * 4 + pick(rng, 4),
            1 + pick(rng, 200)
        ),
        format!("{id}.jpg"),
        format!("https://archive.example/vitrine-demo/{id}"),
        keywords(family, rng),
    ];
    let _ = subject;
    Record { id, family, fields }
}

/// One to three of the family's index keywords, separated by "; " as catalogues export them; one
/// record in ten has none. Drawn after every other field, so that the rest of the record does not
/// depend on them.
fn keywords(family: usize, rng: &mut Rng) -> String {
    if rng.uniform() < 0.1 {
        return String::new();
    }
    let pool = KEYWORDS[family];
    let n = 1 + rng.below(3) as usize;
    let start = rng.below(4) as usize;
    (0..n)
        .map(|k| pool[(start + k) % 4])
        .collect::<Vec<_>>()
        .join("; ")
}

pub struct Generated {
    pub families: Vec<usize>,
    /// Per item: the item whose sheet it is another scan of (None: its own sheet).
    pub copy_of: Vec<Option<usize>>,
}

/// The share of items that are another scan of an earlier item's sheet.
pub const COPY_SHARE: f64 = 0.04;

/// Item `i`'s own random stream.
fn item_rng(seed: u64, i: usize) -> Rng {
    Rng::new(seed.wrapping_mul(1_000_003).wrapping_add(i as u64))
}

/// The stream that ages item `i`'s sheet (and makes its scan when it is a copy), apart from the
/// item's own so that its catalogue record is drawn the same whatever the ageing.
fn ageing_rng(seed: u64, i: usize) -> Rng {
    Rng::new(
        (seed ^ 0x5EED_A9E5)
            .wrapping_mul(2_000_003)
            .wrapping_add(i as u64),
    )
}

/// The earlier item of the same family whose sheet item `i` is another scan of, if it is one
/// (always an item that is not itself a copy).
pub fn copy_source(seed: u64, i: usize, families: usize) -> Option<usize> {
    let mut r = Rng::new(
        (seed ^ 0xC0_91E5)
            .wrapping_mul(3_000_017)
            .wrapping_add(i as u64),
    );
    let earlier = i / families;
    if earlier == 0 || r.uniform() >= COPY_SHARE {
        return None;
    }
    let j = i - families * (1 + r.below(earlier.min(200) as u64) as usize);
    Some(copy_source(seed, j, families).unwrap_or(j))
}

/// Item `i`'s picture: its family's drawing on an aged sheet, or another scan of an earlier
/// item's sheet; and which item that was.
fn sheet(seed: u64, i: usize, family: usize, rng: &mut Rng) -> (image::RgbImage, Option<usize>) {
    let own = draw::picture(family, rng);
    let families = draw::FAMILIES.len();
    match copy_source(seed, i, families) {
        None => {
            let mut img = own;
            draw::age(&mut img, &mut ageing_rng(seed, i));
            (img, None)
        }
        Some(j) => {
            let mut src = draw::picture(family, &mut item_rng(seed, j));
            draw::age(&mut src, &mut ageing_rng(seed, j));
            (draw::rescan(&src, &mut ageing_rng(seed, i)), Some(j))
        }
    }
}

/// Writes `out/images/*.jpg`, `out/records.csv`, `out/features.npy`, `out/feature-ids.txt`, and
/// `out/copies.csv` (which items are other scans of which: what the build should find).
pub fn generate(
    out: &Path,
    count: usize,
    seed: u64,
    progress: &(dyn Fn(u64) + Sync),
) -> anyhow::Result<Generated> {
    std::fs::create_dir_all(out.join("images"))?;
    let done = std::sync::atomic::AtomicU64::new(0);
    #[allow(clippy::type_complexity)]
    let items: Vec<anyhow::Result<(Record, Vec<f32>, Option<usize>)>> = (0..count)
        .into_par_iter()
        .map(|i| {
            let mut rng = item_rng(seed, i);
            let family = i % draw::FAMILIES.len();
            let (img, copy_of) = sheet(seed, i, family, &mut rng);
            let feats = features::describe(&img);
            let rec = record(i, family, &mut rng, img.width(), img.height());
            let path = out.join("images").join(&rec.fields[10]);
            let file = std::io::BufWriter::new(std::fs::File::create(&path)?);
            let enc = image::codecs::jpeg::JpegEncoder::new_with_quality(file, 90);
            img.write_with_encoder(enc)?;
            let c = done.fetch_add(1, std::sync::atomic::Ordering::Relaxed);
            if c.is_multiple_of(32) {
                progress(c);
            }
            Ok((rec, feats, copy_of))
        })
        .collect();
    let mut csv = String::new();
    csv_row(&mut csv, HEADER.iter().copied());
    let mut ids = String::new();
    let mut data = Vec::with_capacity(count * features::DIMENSIONS);
    let mut families = Vec::with_capacity(count);
    let mut copy_of = Vec::with_capacity(count);
    let mut copies = String::from("id,copy_of\n");
    for item in items {
        let (rec, feats, of) = item?;
        if let Some(j) = of {
            copies.push_str(&format!("{},rec-{:06}\n", rec.id, j + 1));
        }
        copy_of.push(of);
        csv_row(&mut csv, rec.fields.iter().map(String::as_str));
        ids.push_str(&rec.id);
        ids.push('\n');
        data.extend(feats);
        families.push(rec.family);
    }
    std::fs::write(out.join("records.csv"), csv)?;
    std::fs::write(out.join("feature-ids.txt"), ids)?;
    std::fs::write(out.join("copies.csv"), copies)?;
    std::fs::write(
        out.join("features.npy"),
        vitrine_format::npy::encode_f32(count, features::DIMENSIONS, &data),
    )?;
    Ok(Generated { families, copy_of })
}

#[cfg(test)]
mod tests {
    use super::*;
    use vitrine_map::knn::{exact_knn, Metric};

    #[test]
    fn families_are_told_apart_by_the_descriptor() {
        // The features come from the pixels alone, so neighbour purity measures the descriptor honestly:
        // most of an item's nearest neighbours should share its family.
        let dir = std::env::temp_dir().join(format!("vitrine-demo-test-{}", std::process::id()));
        let g = generate(&dir, 280, 3, &|_| {}).unwrap();
        let m = vitrine_build::vectors::read_vectors(&dir.join("features.npy")).unwrap();
        assert_eq!((m.rows, m.cols), (280, features::DIMENSIONS));
        let graph = exact_knn(&m, 5, Metric::Cosine, &|_| {});
        let mut same = 0;
        for i in 0..m.rows {
            same += graph
                .neighbours(i)
                .filter(|&(j, _)| g.families[j] == g.families[i])
                .count();
        }
        let purity = same as f64 / (m.rows * 5) as f64;
        assert!(purity > 0.8, "5-NN family purity {purity}");
        // Every dating the generator writes parses by the catalogue's stated rule.
        let csv = vitrine_build::catalogue::read_csv(&dir.join("records.csv"), "id").unwrap();
        let col = csv.column("dating").unwrap();
        for r in &csv.rows {
            assert!(
                r[col].is_empty() || vitrine_build::dates::parse_date(&r[col]).is_some(),
                "{}",
                r[col]
            );
        }
        std::fs::remove_dir_all(&dir).unwrap();
    }

    #[test]
    fn same_seed_same_archive() {
        let mut a = Rng::new(5);
        let mut b = Rng::new(5);
        for f in 0..draw::FAMILIES.len() {
            assert_eq!(draw::picture(f, &mut a), draw::picture(f, &mut b));
        }
    }
}

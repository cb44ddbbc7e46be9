//! The browser's store of coding (IndexedDB): per atlas address, one record for the codebook and
//! coder, and one record per code, so that setting a code writes that code alone whatever the
//! number of codes. A write counts as done when its transaction completes (not when a request
//! succeeds: a full disk or an abort would otherwise pass unseen).

use super::*;
use vitrine_corpus::coding::{Cleared, Code, Codebook};
use vitrine_view::coding::CodeKey;
use wasm_bindgen::JsValue;

const DB_NAME: &str = "vitrine-coding";
const DB_VERSION: u32 = 1;
const BOOKS: &str = "books";
const CODES: &str = "codes";

/// The codebook record of an atlas.
#[derive(serde::Serialize, serde::Deserialize)]
pub struct Book {
    pub format: String,
    pub atlas_sha256: String,
    pub coder: String,
    pub codebook: Codebook,
}

/// What the store holds for an atlas.
pub struct Kept {
    pub book: Option<Book>,
    pub codes: Vec<Code>,
    /// Codes taken back, and when.
    pub cleared: Vec<Cleared>,
    /// Records that could not be read (left in the store, never overwritten).
    pub unreadable: usize,
}

/// The key this atlas's coding is kept under: the page's address without the file name, so
/// that a rebuilt atlas at the same place finds its codes again.
pub fn atlas_key() -> String {
    let loc = web_sys::window().unwrap().location();
    let path = loc.pathname().unwrap_or_default();
    let dir = &path[..path.rfind('/').map_or(0, |k| k + 1)];
    format!("{}{dir}", loc.origin().unwrap_or_default())
}

fn code_key(atlas: &str, k: &CodeKey) -> JsValue {
    let a = js_sys::Array::new();
    a.push(&atlas.into());
    a.push(&k.0.as_str().into());
    a.push(&k.1.as_str().into());
    a.push(&k.2.as_str().into());
    a.push(&JsValue::from(u8::from(k.3)));
    a.into()
}

fn message(e: JsValue) -> String {
    e.as_string().unwrap_or_else(|| "IndexedDB failed".into())
}

/// A promise settled by an IndexedDB request.
fn request(req: &web_sys::IdbRequest) -> js_sys::Promise {
    let req = req.clone();
    js_sys::Promise::new(&mut |resolve, reject| {
        let r2 = req.clone();
        let ok = Closure::once_into_js(move |_e: web_sys::Event| {
            let _ = resolve.call1(&JsValue::NULL, &r2.result().unwrap_or(JsValue::UNDEFINED));
        });
        let r3 = req.clone();
        let bad = Closure::once_into_js(move |_e: web_sys::Event| {
            let why = r3
                .error()
                .ok()
                .flatten()
                .map(|e| e.message())
                .unwrap_or_else(|| "the request failed".into());
            let _ = reject.call1(&JsValue::NULL, &JsValue::from_str(&why));
        });
        req.set_onsuccess(Some(ok.unchecked_ref()));
        req.set_onerror(Some(bad.unchecked_ref()));
    })
}

/// A promise settled when the transaction completes (or fails, or is aborted).
fn completed(tx: &web_sys::IdbTransaction) -> js_sys::Promise {
    let tx = tx.clone();
    js_sys::Promise::new(&mut |resolve, reject| {
        let ok = Closure::once_into_js(move |_e: web_sys::Event| {
            let _ = resolve.call0(&JsValue::NULL);
        });
        let t2 = tx.clone();
        let r2 = reject.clone();
        let bad = Closure::once_into_js(move |_e: web_sys::Event| {
            let why = t2
                .error()
                .map(|e| e.message())
                .unwrap_or_else(|| "the transaction failed".into());
            let _ = r2.call1(&JsValue::NULL, &JsValue::from_str(&why));
        });
        let t3 = tx.clone();
        let aborted = Closure::once_into_js(move |_e: web_sys::Event| {
            let why = t3
                .error()
                .map(|e| e.message())
                .unwrap_or_else(|| "the transaction was aborted".into());
            let _ = reject.call1(&JsValue::NULL, &JsValue::from_str(&why));
        });
        tx.set_oncomplete(Some(ok.unchecked_ref()));
        tx.set_onerror(Some(bad.unchecked_ref()));
        tx.set_onabort(Some(aborted.unchecked_ref()));
    })
}

async fn open() -> Result<web_sys::IdbDatabase, String> {
    let factory = web_sys::window()
        .and_then(|w| w.indexed_db().ok().flatten())
        .ok_or("this browser gives the page no IndexedDB (a private window?)")?;
    let open = factory
        .open_with_u32(DB_NAME, DB_VERSION)
        .map_err(|_| "IndexedDB refused to open".to_string())?;
    let o2 = open.clone();
    let upgrade = Closure::once_into_js(move |_e: web_sys::Event| {
        if let Ok(db) = o2
            .result()
            .and_then(|r| r.dyn_into::<web_sys::IdbDatabase>())
        {
            for name in [BOOKS, CODES] {
                if !db.object_store_names().contains(name) {
                    let _ = db.create_object_store(name);
                }
            }
        }
    });
    open.set_onupgradeneeded(Some(upgrade.unchecked_ref()));
    let db = JsFuture::from(request(&open)).await.map_err(message)?;
    db.dyn_into()
        .map_err(|_| "IndexedDB gave no database".to_string())
}

fn stores(
    db: &web_sys::IdbDatabase,
    mode: web_sys::IdbTransactionMode,
) -> Result<
    (
        web_sys::IdbTransaction,
        web_sys::IdbObjectStore,
        web_sys::IdbObjectStore,
    ),
    String,
> {
    let names = js_sys::Array::of2(&BOOKS.into(), &CODES.into());
    let tx = db
        .transaction_with_str_sequence_and_mode(&names, mode)
        .map_err(|_| "IndexedDB: no transaction".to_string())?;
    let books = tx
        .object_store(BOOKS)
        .map_err(|_| "IndexedDB: no store".to_string())?;
    let codes = tx
        .object_store(CODES)
        .map_err(|_| "IndexedDB: no store".to_string())?;
    Ok((tx, books, codes))
}

/// Everything kept for `atlas`.
pub async fn read(atlas: &str) -> Result<Kept, String> {
    let db = open().await?;
    let (_tx, books, codes) = stores(&db, web_sys::IdbTransactionMode::Readonly)?;
    let book = books
        .get(&atlas.into())
        .map_err(|_| "IndexedDB: the request was refused".to_string())?;
    let lower = js_sys::Array::of1(&atlas.into());
    let upper = js_sys::Array::of2(&atlas.into(), &js_sys::Array::new());
    let range = web_sys::IdbKeyRange::bound(&lower, &upper)
        .map_err(|_| "IndexedDB: no key range".to_string())?;
    let all = codes
        .get_all_with_key(&range)
        .map_err(|_| "IndexedDB: the request was refused".to_string())?;
    let book = JsFuture::from(request(&book)).await.map_err(message)?;
    let all = JsFuture::from(request(&all)).await.map_err(message)?;
    db.close();
    let mut unreadable = 0;
    let book = match book.as_string() {
        Some(t) => match serde_json::from_str::<Book>(&t) {
            Ok(b) => Some(b),
            Err(_) => {
                unreadable += 1;
                None
            }
        },
        None => None,
    };
    let (mut out, mut cleared) = (Vec::new(), Vec::new());
    for v in js_sys::Array::from(&all).iter() {
        // A record is a code, or a code taken back (no value).
        let text = v.as_string().unwrap_or_default();
        if let Ok(c) = serde_json::from_str::<Code>(&text) {
            out.push(c);
        } else if let Ok(c) = serde_json::from_str::<Cleared>(&text) {
            cleared.push(c);
        } else {
            unreadable += 1;
        }
    }
    Ok(Kept {
        book,
        codes: out,
        cleared,
        unreadable,
    })
}

/// Writes the codebook record and `puts`, removes `deletes`, in one transaction; done when it
/// completes.
pub async fn write(
    atlas: &str,
    book: &Book,
    puts: &[Code],
    clears: &[Cleared],
    deletes: &[CodeKey],
) -> Result<(), String> {
    let db = open().await?;
    let (tx, books, codes) = stores(&db, web_sys::IdbTransactionMode::Readwrite)?;
    let done = completed(&tx);
    let refused = |_| "IndexedDB: the write was refused".to_string();
    let text = serde_json::to_string(book).map_err(|e| e.to_string())?;
    books
        .put_with_key(&text.into(), &atlas.into())
        .map_err(refused)?;
    for c in puts {
        let key = (
            c.item.clone(),
            c.variable.clone(),
            c.coder.clone(),
            c.settled,
        );
        let text = serde_json::to_string(c).map_err(|e| e.to_string())?;
        codes
            .put_with_key(&text.into(), &code_key(atlas, &key))
            .map_err(refused)?;
    }
    for c in clears {
        let text = serde_json::to_string(c).map_err(|e| e.to_string())?;
        codes
            .put_with_key(&text.into(), &code_key(atlas, &c.owned_key()))
            .map_err(refused)?;
    }
    for k in deletes {
        codes.delete(&code_key(atlas, k)).map_err(refused)?;
    }
    let r = JsFuture::from(done).await.map_err(message);
    db.close();
    r.map(|_| ())
}

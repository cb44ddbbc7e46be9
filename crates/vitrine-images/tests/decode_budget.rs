//! The decoding budget: decoded full-size images held at once by all threads stay within it, and
//! an image that needs more than the whole budget is refused, named as too large. (Its own test
//! binary: the budget is process-wide.)

use image::{DynamicImage, ImageBuffer, Rgba};
use vitrine_images::decode::{decode, decode_high_water, set_decode_budget, ImageFailure};

/// A 16-bit RGBA PNG of 1000 x 1000 pixels: small on disk, 8 MB decoded.
fn big_png() -> Vec<u8> {
    let img: ImageBuffer<Rgba<u16>, Vec<u16>> = ImageBuffer::from_fn(1000, 1000, |x, y| {
        Rgba([(x * 60) as u16, (y * 60) as u16, 9000, 65535])
    });
    let mut out = Vec::new();
    DynamicImage::ImageRgba16(img)
        .write_to(&mut std::io::Cursor::new(&mut out), image::ImageFormat::Png)
        .unwrap();
    out
}

#[test]
fn decoded_images_stay_within_the_budget_and_one_too_big_for_it_is_refused() {
    let png = big_png();
    // Its peak: the 8 MB decoder buffer and the 3 MB RGB image made from it.
    let peak = 8_000_000 + 3_000_000;
    set_decode_budget(4 << 20);
    let e = decode(&png, u64::MAX).unwrap_err();
    assert!(
        matches!(e, ImageFailure::OverBudget { bytes, .. } if bytes == peak),
        "{e}"
    );
    assert_eq!(e.kind(), "too large");
    assert!(e.to_string().contains("--decode-memory"), "{e}");

    // Room for two at once: six threads decoding three each all succeed, never more than two
    // held together.
    set_decode_budget(24 << 20);
    std::thread::scope(|s| {
        for _ in 0..6 {
            s.spawn(|| {
                for _ in 0..3 {
                    let d = decode(&png, u64::MAX).unwrap();
                    assert_eq!(d.rgb.dimensions(), (1000, 1000));
                }
            });
        }
    });
    let high = decode_high_water();
    assert!(high >= peak && high <= 2 * peak, "held at once: {high}");

    // The share is held as long as the full-size image is (the thumbnail is made from it after
    // decoding): with room for one, a second decode waits until the first image is dropped.
    set_decode_budget(12 << 20);
    let first = decode(&png, u64::MAX).unwrap();
    let done = std::sync::atomic::AtomicBool::new(false);
    std::thread::scope(|s| {
        let second = s.spawn(|| {
            let d = decode(&png, u64::MAX).unwrap();
            done.store(true, std::sync::atomic::Ordering::SeqCst);
            d.rgb.dimensions()
        });
        std::thread::sleep(std::time::Duration::from_millis(500));
        assert!(
            !done.load(std::sync::atomic::Ordering::SeqCst),
            "decoded beside a held image"
        );
        drop(first);
        assert_eq!(second.join().unwrap(), (1000, 1000));
    });
}

//! The 2-megapixel photo of the image benchmarks: `VQFORGE_BENCH_PHOTO=path`
//! if set, else scikit-image's astronaut (tests/data/images/astronaut.png,
//! 512 × 512) enlarged to 1414 × 1414 with the `image` crate's triangle
//! (bilinear) filter; the interpolation makes hundreds of thousands of
//! distinct colours, as a camera photo of that size has.

use image::imageops::{resize, FilterType};
use vqforge::load::{read_image, ImageLimits, RgbaImage};

/// The photo and a name for it.
pub fn photo() -> (String, RgbaImage) {
    let limits = ImageLimits::default();
    if let Ok(path) = std::env::var("VQFORGE_BENCH_PHOTO") {
        let bytes = std::fs::read(&path).unwrap_or_else(|e| panic!("reading {path}: {e}"));
        let img = read_image(&bytes, &path, &limits).expect("a readable image");
        return (path, img);
    }
    let path = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/data/images/astronaut.png"
    );
    let bytes = std::fs::read(path).expect("the committed astronaut photo");
    let small = read_image(&bytes, path, &limits).expect("a readable PNG");
    let flat: Vec<u8> = small.pixels.iter().flatten().copied().collect();
    let buffer = image::RgbaImage::from_raw(small.width, small.height, flat).expect("whole pixels");
    let big = resize(&buffer, 1414, 1414, FilterType::Triangle);
    let pixels = big.pixels().map(|p| p.0).collect::<Vec<[u8; 4]>>();
    let name = "astronaut enlarged to 1414 × 1414".to_string();
    (
        name,
        RgbaImage {
            width: big.width(),
            height: big.height(),
            pixels,
        },
    )
}

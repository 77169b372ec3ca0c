//! PNG export of RGBA images (8-bit, straight alpha), through the `image` crate.

use super::RenderError;
use image::ImageEncoder;
use std::path::Path;

fn check_buffer(width: usize, height: usize, rgba: &[u8]) -> Result<(u32, u32), RenderError> {
    let n = super::check_size(width, height)?;
    if rgba.len() != 4 * n {
        return Err(RenderError::BufferSize {
            width,
            height,
            expected: 4 * n,
            got: rgba.len(),
        });
    }
    // MAX_SIDE is far below u32::MAX
    Ok((width as u32, height as u32))
}

/// Writes `rgba` (`4·width·height` bytes, row-major, top row first) to `path` as PNG,
/// atomically (`export::write_atomic`): a full disk or a crash leaves the previous file or none,
/// never a PNG cut short.
pub fn save_png(path: &Path, width: usize, height: usize, rgba: &[u8]) -> Result<(), RenderError> {
    let (w, h) = check_buffer(width, height, rgba)?;
    let mut failure = None;
    crate::export::write_atomic(path, |out| {
        image::codecs::png::PngEncoder::new(out)
            .write_image(rgba, w, h, image::ExtendedColorType::Rgba8)
            .map_err(|e| {
                let io = std::io::Error::other(e.to_string());
                failure = Some(e);
                io
            })
    })
    .map_err(|e| match failure {
        Some(source) => RenderError::Png {
            path: path.display().to_string(),
            source,
        },
        None => RenderError::Write(e),
    })
}

/// Encodes `rgba` as PNG bytes in memory.
pub fn encode_png(width: usize, height: usize, rgba: &[u8]) -> Result<Vec<u8>, RenderError> {
    let (w, h) = check_buffer(width, height, rgba)?;
    let mut out = Vec::new();
    image::codecs::png::PngEncoder::new(&mut out)
        .write_image(rgba, w, h, image::ExtendedColorType::Rgba8)
        .map_err(|source| RenderError::Png {
            path: "<memory>".to_owned(),
            source,
        })?;
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn round_trips_through_the_decoder() {
        let (w, h) = (3usize, 2usize);
        let rgba: Vec<u8> = (0..(4 * w * h) as u8).map(|v| v.wrapping_mul(37)).collect();
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("t.png");
        save_png(&path, w, h, &rgba).unwrap();
        let back = image::open(&path).unwrap().to_rgba8();
        assert_eq!((back.width(), back.height()), (3, 2));
        assert_eq!(back.into_raw(), rgba);
        let bytes = encode_png(w, h, &rgba).unwrap();
        assert_eq!(&bytes[..8], b"\x89PNG\r\n\x1a\n"); // PNG signature, PNG spec 5.2
        assert!(matches!(
            save_png(&path, w, h, &rgba[1..]),
            Err(RenderError::BufferSize { .. })
        ));
        let bad = dir.path().join("no/such/dir/t.png");
        let e = save_png(&bad, w, h, &rgba).unwrap_err();
        assert!(e.to_string().contains("t.png"));
    }
}

//! A picture's PNG file (8-bit RGB, W3C PNG Specification, 2nd edition):
//! every row with the `Up` filter, deflated by our own encoder
//! (`deflate.rs`), the whole file made in memory and written at once.
//!
//! Plots are mostly flat colour, so `Up` turns most bytes into zeros,
//! which the encoder sends as runs. The buffers (filtered rows, hash
//! table, symbols, file bytes) are kept by each worker for its next
//! picture: fresh pages of a multi-megabyte buffer cost a fault per 4 KiB.

use super::deflate::Deflater;
use std::cell::RefCell;

/// Buffers larger than this are not kept for the next picture.
const KEPT_BYTES: usize = 16 << 20;
/// Filtered bytes deflated at a time.
const STRIP_BYTES: usize = 32 << 10;

#[derive(Default)]
struct Scratch {
    filtered: Vec<u8>,
    file: Vec<u8>,
    deflater: Deflater,
}

thread_local! {
    static SCRATCH: RefCell<Scratch> = RefCell::new(Scratch::default());
}

/// The PNG file of the `w` x `h` RGB image `rgb` (rows top down), handed
/// to `write` as one slice.
pub fn encode<T>(w: u32, h: u32, rgb: &[u8], write: impl FnOnce(&[u8]) -> T) -> T {
    let mut scratch = SCRATCH.with(|s| std::mem::take(&mut *s.borrow_mut()));
    let stride = 3 * w as usize;
    assert_eq!(rgb.len(), stride * h as usize, "an RGB image of {w} x {h} pixels");
    let Scratch { filtered, file, deflater } = &mut scratch;
    filtered.resize(rgb.len() + h as usize, 0);

    file.clear();
    file.extend_from_slice(b"\x89PNG\r\n\x1a\n");
    let mut header = [0u8; 13];
    header[..4].copy_from_slice(&w.to_be_bytes());
    header[4..8].copy_from_slice(&h.to_be_bytes());
    // Bit depth 8, colour type 2 (RGB), deflate, adaptive filtering, no interlace.
    header[8..].copy_from_slice(&[8, 2, 0, 0, 0]);
    chunk(file, b"IHDR", |file| file.extend_from_slice(&header));
    chunk(file, b"IDAT", |file| {
        // Rows are filtered, summed and deflated a strip of about 32 KiB at
        // a time, each strip while it is in the cache.
        deflater.start(file);
        let strip = (STRIP_BYTES / (stride + 1)).max(1);
        let mut adler = 1;
        let mut done = 0;
        for y in (0..h as usize).step_by(strip) {
            let rows = strip.min(h as usize - y);
            let end = done + rows * (stride + 1);
            let above = if y == 0 { None } else { Some(&rgb[(y - 1) * stride..y * stride]) };
            up_filter(&rgb[y * stride..(y + rows) * stride], above, stride, &mut filtered[done..end]);
            adler = zlib_rs::adler32::adler32(adler, &filtered[done..end]);
            deflater.feed(&filtered[..end], end == filtered.len(), file);
            done = end;
        }
        deflater.finish(adler, file);
    });
    chunk(file, b"IEND", |_| {});
    let result = write(file);
    if scratch.filtered.capacity() <= KEPT_BYTES && scratch.file.capacity() <= KEPT_BYTES {
        SCRATCH.with(|s| *s.borrow_mut() = scratch);
    }
    result
}

/// The rows of `rgb` as the `Up` filter gives them (PNG 9.2: filter
/// type 2, each byte minus the one above it; the picture's first row
/// against zeros), into `out`, one more byte a row.
fn up_filter(rgb: &[u8], above: Option<&[u8]>, stride: usize, out: &mut [u8]) {
    let mut above = above.unwrap_or(&[]);
    for (row, filtered) in rgb.chunks_exact(stride).zip(out.chunks_exact_mut(stride + 1)) {
        filtered[0] = 2;
        if above.is_empty() {
            filtered[1..].copy_from_slice(row);
        } else {
            for ((f, &x), &b) in filtered[1..].iter_mut().zip(row).zip(above) {
                *f = x.wrapping_sub(b);
            }
        }
        above = row;
    }
}

/// Append a chunk: length, type, what `body` appends, CRC of type and body.
fn chunk(file: &mut Vec<u8>, kind: &[u8; 4], body: impl FnOnce(&mut Vec<u8>)) {
    let start = file.len();
    file.extend_from_slice(&[0; 4]);
    file.extend_from_slice(kind);
    body(file);
    let len = u32::try_from(file.len() - start - 8).expect("a PNG chunk under 2 GiB");
    file[start..start + 4].copy_from_slice(&len.to_be_bytes());
    let crc = zlib_rs::crc32::crc32(0, &file[start + 4..]);
    file.extend_from_slice(&crc.to_be_bytes());
}

#[cfg(test)]
pub(super) mod tests {
    use super::encode;
    use std::io::Read;

    /// Inflate a zlib stream with flate2 (a decoder independent of ours).
    pub fn inflate(z: &[u8]) -> Vec<u8> {
        let mut out = Vec::new();
        flate2::read::ZlibDecoder::new(z).read_to_end(&mut out).expect("a valid zlib stream");
        out
    }

    fn decode(file: &[u8]) -> (u32, u32, png::ColorType, Vec<u8>) {
        let mut reader = png::Decoder::new(std::io::Cursor::new(file)).read_info().expect("a PNG header");
        let mut buf = vec![0; reader.output_buffer_size().expect("a size")];
        let info = reader.next_frame(&mut buf).expect("a PNG frame");
        buf.truncate(info.buffer_size());
        (info.width, info.height, info.color_type, buf)
    }

    /// Flat ground, lines, a gradient and noise, in pictures of several
    /// sizes one after another (the buffers reused, larger and smaller):
    /// the `png` crate decodes each to the same pixels, CRCs checked.
    #[test]
    fn files_decode_to_the_same_pixels() {
        let mut state = 99u32;
        let mut noise = move || {
            state = state.wrapping_mul(1_103_515_245).wrapping_add(12345);
            (state >> 16) as u8
        };
        for &(w, h) in &[(300u32, 200u32), (1, 1), (37, 5), (1200, 640), (64, 300)] {
            let mut rgb = vec![0u8; 3 * (w * h) as usize];
            for y in 0..h as usize {
                for x in 0..w as usize {
                    let p = &mut rgb[3 * (y * w as usize + x)..][..3];
                    p.copy_from_slice(&[250, 247, 240]);
                    if y % 17 == 0 || x % 50 == 0 {
                        p.copy_from_slice(&[222, 216, 204]);
                    }
                    if (x + y) % 97 < 3 {
                        p.copy_from_slice(&[(x % 256) as u8, (y % 256) as u8, 7]);
                    }
                    if x > w as usize / 2 && y > h as usize / 2 && x < w as usize / 2 + 20 {
                        p.copy_from_slice(&[noise(), noise(), noise()]);
                    }
                }
            }
            let file = encode(w, h, &rgb, |f| f.to_vec());
            let (dw, dh, colour, pixels) = decode(&file);
            assert_eq!((dw, dh, colour), (w, h, png::ColorType::Rgb));
            assert!(pixels == rgb, "pixels of the {w} x {h} picture changed");
        }
    }
}

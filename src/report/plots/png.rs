//! A minimal PNG writer for heatmap cells, embedded in the SVG as a base64
//! `data:` URI. One `<rect>` per cell would make a 512×512 heatmap tens of
//! megabytes; an 8-bit palette image is one byte per cell.
//!
//! Only what we need: colour type 3 (palette), bit depth 8, filter 0 on every
//! row, and a zlib stream made of *stored* (uncompressed) deflate blocks, with
//! the CRC-32 and Adler-32 checksums computed here (PNG spec, ISO/IEC 15948;
//! zlib RFC 1950; deflate RFC 1951 §3.2.4).

/// CRC-32 as used by PNG chunks (reflected polynomial 0xEDB88320, initial and
/// final XOR 0xFFFFFFFF; PNG spec annex D).
pub(crate) fn crc32(bytes: &[u8]) -> u32 {
    let mut table = [0u32; 256];
    for (n, entry) in table.iter_mut().enumerate() {
        let mut c = n as u32;
        for _ in 0..8 {
            c = if c & 1 != 0 {
                0xEDB8_8320 ^ (c >> 1)
            } else {
                c >> 1
            };
        }
        *entry = c;
    }
    let mut crc = 0xFFFF_FFFFu32;
    for &b in bytes {
        crc = table[((crc ^ b as u32) & 0xFF) as usize] ^ (crc >> 8);
    }
    crc ^ 0xFFFF_FFFF
}

/// Adler-32 checksum of the uncompressed data (RFC 1950 §8.2).
pub(crate) fn adler32(bytes: &[u8]) -> u32 {
    const MOD: u32 = 65_521;
    let (mut a, mut b) = (1u32, 0u32);
    // 5552 is the largest block for which the sums cannot overflow u32 (RFC 1950 sample code).
    for chunk in bytes.chunks(5552) {
        for &x in chunk {
            a += x as u32;
            b += a;
        }
        a %= MOD;
        b %= MOD;
    }
    (b << 16) | a
}

/// Standard base64 with padding (RFC 4648 §4).
pub(crate) fn base64(bytes: &[u8]) -> String {
    const ALPHABET: &[u8; 64] = b"ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789+/";
    let mut out = String::with_capacity(bytes.len().div_ceil(3) * 4);
    for chunk in bytes.chunks(3) {
        let b = [
            chunk[0],
            chunk.get(1).copied().unwrap_or(0),
            chunk.get(2).copied().unwrap_or(0),
        ];
        let n = ((b[0] as u32) << 16) | ((b[1] as u32) << 8) | b[2] as u32;
        out.push(ALPHABET[(n >> 18) as usize & 63] as char);
        out.push(ALPHABET[(n >> 12) as usize & 63] as char);
        out.push(if chunk.len() > 1 {
            ALPHABET[(n >> 6) as usize & 63] as char
        } else {
            '='
        });
        out.push(if chunk.len() > 2 {
            ALPHABET[n as usize & 63] as char
        } else {
            '='
        });
    }
    out
}

/// A zlib stream holding `data` in stored deflate blocks of at most 65 535 bytes.
pub(crate) fn zlib_stored(data: &[u8]) -> Vec<u8> {
    let blocks = data.len().div_ceil(65_535).max(1);
    let mut out = Vec::with_capacity(data.len() + blocks * 5 + 6);
    // CMF: deflate, 32 KiB window; FLG: chosen so CMF*256+FLG is a multiple of 31.
    out.extend_from_slice(&[0x78, 0x01]);
    if data.is_empty() {
        out.extend_from_slice(&[0x01, 0x00, 0x00, 0xFF, 0xFF]);
    }
    let mut chunks = data.chunks(65_535).peekable();
    while let Some(chunk) = chunks.next() {
        let last = chunks.peek().is_none();
        out.push(u8::from(last)); // BFINAL bit, BTYPE = 00 (stored)
        let len = chunk.len() as u16;
        out.extend_from_slice(&len.to_le_bytes());
        out.extend_from_slice(&(!len).to_le_bytes());
        out.extend_from_slice(chunk);
    }
    out.extend_from_slice(&adler32(data).to_be_bytes());
    out
}

fn chunk(out: &mut Vec<u8>, kind: &[u8; 4], data: &[u8]) {
    out.extend_from_slice(&(data.len() as u32).to_be_bytes());
    let start = out.len();
    out.extend_from_slice(kind);
    out.extend_from_slice(data);
    let crc = crc32(&out[start..]);
    out.extend_from_slice(&crc.to_be_bytes());
}

/// Encodes a palette image. `indices` is row-major, `width × height` entries,
/// each an index into `palette` (at most 256 colours). Returns `None` when the
/// sizes disagree or the image is empty.
pub(crate) fn encode_indexed(
    width: usize,
    height: usize,
    indices: &[u8],
    palette: &[[u8; 3]],
) -> Option<Vec<u8>> {
    if width == 0
        || height == 0
        || width.checked_mul(height)? != indices.len()
        || palette.is_empty()
        || palette.len() > 256
        || width > u32::MAX as usize
        || height > u32::MAX as usize
    {
        return None;
    }
    let mut raw = Vec::with_capacity((width + 1) * height);
    for row in indices.chunks(width) {
        raw.push(0); // filter type 0: none
        raw.extend_from_slice(row);
    }
    let mut out = Vec::with_capacity(raw.len() + 1024);
    out.extend_from_slice(&[0x89, b'P', b'N', b'G', 0x0D, 0x0A, 0x1A, 0x0A]);
    let mut ihdr = Vec::with_capacity(13);
    ihdr.extend_from_slice(&(width as u32).to_be_bytes());
    ihdr.extend_from_slice(&(height as u32).to_be_bytes());
    // bit depth 8, colour type 3, compression 0, filter 0, no interlace
    ihdr.extend_from_slice(&[8, 3, 0, 0, 0]);
    chunk(&mut out, b"IHDR", &ihdr);
    let plte: Vec<u8> = palette.iter().flatten().copied().collect();
    chunk(&mut out, b"PLTE", &plte);
    chunk(&mut out, b"IDAT", &zlib_stored(&raw));
    chunk(&mut out, b"IEND", &[]);
    Some(out)
}

/// `data:image/png;base64,...` for a palette image (see [`encode_indexed`]).
pub(crate) fn data_uri(
    width: usize,
    height: usize,
    indices: &[u8],
    palette: &[[u8; 3]],
) -> Option<String> {
    let png = encode_indexed(width, height, indices, palette)?;
    Some(format!("data:image/png;base64,{}", base64(&png)))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn crc32_matches_the_standard_check_value() {
        // Check value of CRC-32/ISO-HDLC for "123456789" (catalogue of
        // parametrised CRC algorithms; the value PNG's CRC must give).
        assert_eq!(crc32(b"123456789"), 0xCBF4_3926);
        // The IEND chunk trailer every PNG ends with: AE 42 60 82.
        assert_eq!(crc32(b"IEND"), 0xAE42_6082);
    }

    #[test]
    fn adler32_matches_worked_example() {
        // Adler-32 of "Wikipedia" is 0x11E60398 (worked example commonly quoted
        // for RFC 1950; from memory, and recomputed by hand from the definition:
        // A = 1 + sum of bytes = 920 = 0x398, B = sum of the running A = 4582 = 0x11E6).
        assert_eq!(adler32(b"Wikipedia"), 0x11E6_0398);
        assert_eq!(adler32(b""), 1);
    }

    #[test]
    fn base64_matches_rfc4648_test_vectors() {
        // RFC 4648 §10.
        let cases = [
            ("", ""),
            ("f", "Zg=="),
            ("fo", "Zm8="),
            ("foo", "Zm9v"),
            ("foob", "Zm9vYg=="),
            ("fooba", "Zm9vYmE="),
            ("foobar", "Zm9vYmFy"),
        ];
        for (input, want) in cases {
            assert_eq!(base64(input.as_bytes()), want);
        }
    }

    #[test]
    fn png_decodes_with_the_png_crate() {
        // The `png` crate (an independent, widely used decoder) must read our
        // file back pixel for pixel, including images needing several stored blocks.
        let palette: Vec<[u8; 3]> = (0..=255u8).map(|i| [i, 255 - i, i / 2]).collect();
        for (w, h) in [(1, 1), (7, 3), (300, 260)] {
            let idx: Vec<u8> = (0..w * h).map(|i| (i * 31 % 256) as u8).collect();
            let bytes = encode_indexed(w, h, &idx, &palette).expect("valid input");
            let mut decoder = png::Decoder::new(std::io::Cursor::new(bytes));
            decoder.set_transformations(png::Transformations::EXPAND);
            let mut reader = decoder.read_info().expect("header");
            let mut buf = vec![0; reader.output_buffer_size().expect("size")];
            let info = reader.next_frame(&mut buf).expect("frame");
            assert_eq!((info.width as usize, info.height as usize), (w, h));
            assert_eq!(info.color_type, png::ColorType::Rgb);
            for (i, &k) in idx.iter().enumerate() {
                assert_eq!(&buf[3 * i..3 * i + 3], &palette[k as usize]);
            }
        }
    }

    #[test]
    fn inconsistent_sizes_give_none() {
        assert!(encode_indexed(2, 2, &[0, 0, 0], &[[0, 0, 0]]).is_none());
        assert!(encode_indexed(0, 0, &[], &[[0, 0, 0]]).is_none());
    }
}

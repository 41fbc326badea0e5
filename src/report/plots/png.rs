//! A minimal PNG writer for heatmap cells, embedded in the SVG as a base64
//! `data:` URI. One `<rect>` per cell would make a 512×512 heatmap tens of
//! megabytes; an 8-bit palette image is one byte per cell.
//!
//! Only what we need: colour type 3 (palette), bit depth 8, filter 0 on every
//! row, and a zlib stream holding one deflate block with the fixed Huffman
//! codes and greedy LZ77 matches (or stored blocks when that is smaller), with
//! the CRC-32 and Adler-32 checksums computed here (PNG spec, ISO/IEC 15948;
//! zlib RFC 1950; deflate RFC 1951).

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

/// Writes bits least-significant first, as deflate requires (RFC 1951 §3.1.1).
struct BitWriter {
    out: Vec<u8>,
    acc: u64,
    n: u32,
}

impl BitWriter {
    fn put(&mut self, value: u32, bits: u32) {
        self.acc |= u64::from(value) << self.n;
        self.n += bits;
        while self.n >= 8 {
            self.out.push(self.acc as u8);
            self.acc >>= 8;
            self.n -= 8;
        }
    }

    /// A Huffman code is defined most-significant bit first, so it is reversed
    /// before packing (RFC 1951 §3.1.1).
    fn put_code(&mut self, code: u32, bits: u32) {
        self.put(code.reverse_bits() >> (32 - bits), bits);
    }

    fn finish(mut self) -> Vec<u8> {
        if self.n > 0 {
            self.out.push(self.acc as u8);
        }
        self.out
    }
}

/// Literal/length symbol with the fixed Huffman code of RFC 1951 §3.2.6.
fn put_fixed_symbol(w: &mut BitWriter, sym: u32) {
    match sym {
        0..=143 => w.put_code(0x30 + sym, 8),
        144..=255 => w.put_code(0x190 + sym - 144, 9),
        256..=279 => w.put_code(sym - 256, 7),
        _ => w.put_code(0xC0 + sym - 280, 8),
    }
}

/// Base lengths of length codes 257..=285 and their extra bits (RFC 1951 §3.2.5).
const LEN_BASE: [u16; 29] = [
    3, 4, 5, 6, 7, 8, 9, 10, 11, 13, 15, 17, 19, 23, 27, 31, 35, 43, 51, 59, 67, 83, 99, 115, 131,
    163, 195, 227, 258,
];
const LEN_EXTRA: [u8; 29] = [
    0, 0, 0, 0, 0, 0, 0, 0, 1, 1, 1, 1, 2, 2, 2, 2, 3, 3, 3, 3, 4, 4, 4, 4, 5, 5, 5, 5, 0,
];
/// Base distances of distance codes 0..=29 and their extra bits (RFC 1951 §3.2.5).
const DIST_BASE: [u16; 30] = [
    1, 2, 3, 4, 5, 7, 9, 13, 17, 25, 33, 49, 65, 97, 129, 193, 257, 385, 513, 769, 1025, 1537,
    2049, 3073, 4097, 6145, 8193, 12289, 16385, 24577,
];
const DIST_EXTRA: [u8; 30] = [
    0, 0, 0, 0, 1, 1, 2, 2, 3, 3, 4, 4, 5, 5, 6, 6, 7, 7, 8, 8, 9, 9, 10, 10, 11, 11, 12, 12, 13,
    13,
];

fn put_match(w: &mut BitWriter, len: usize, dist: usize) {
    let li = LEN_BASE
        .iter()
        .rposition(|&b| usize::from(b) <= len)
        .unwrap_or(0);
    put_fixed_symbol(w, 257 + li as u32);
    w.put(
        (len - usize::from(LEN_BASE[li])) as u32,
        u32::from(LEN_EXTRA[li]),
    );
    let di = DIST_BASE
        .iter()
        .rposition(|&b| usize::from(b) <= dist)
        .unwrap_or(0);
    w.put_code(di as u32, 5);
    w.put(
        (dist - usize::from(DIST_BASE[di])) as u32,
        u32::from(DIST_EXTRA[di]),
    );
}

/// One deflate block with the fixed Huffman codes, matches found greedily
/// with a hash chain over 3-byte prefixes (the LZ77 scheme RFC 1951 §4
/// describes). Heatmap rows repeat whole (upscaled cells) or hold runs of one
/// colour, so this small encoder already shrinks them several-fold.
pub(crate) fn deflate_fixed(data: &[u8]) -> Vec<u8> {
    const WINDOW: usize = 32_768;
    const MAX_CHAIN: usize = 48;
    const HASH_BITS: u32 = 15;
    let hash = |i: usize| -> usize {
        let v = u32::from(data[i]) | u32::from(data[i + 1]) << 8 | u32::from(data[i + 2]) << 16;
        (v.wrapping_mul(0x9E37_79B1) >> (32 - HASH_BITS)) as usize
    };
    let mut head = vec![usize::MAX; 1 << HASH_BITS];
    let mut prev = vec![usize::MAX; WINDOW];
    let mut w = BitWriter {
        out: Vec::with_capacity(data.len() / 4 + 16),
        acc: 0,
        n: 0,
    };
    w.put(1, 1); // BFINAL
    w.put(1, 2); // BTYPE = 01, fixed Huffman codes
    let insert = |i: usize, head: &mut Vec<usize>, prev: &mut Vec<usize>| {
        if i + 2 < data.len() {
            let h = hash(i);
            prev[i % WINDOW] = head[h];
            head[h] = i;
        }
    };
    let mut i = 0;
    while i < data.len() {
        let (mut best_len, mut best_dist) = (0, 0);
        if i + 2 < data.len() {
            let mut cand = head[hash(i)];
            let mut chain = 0;
            while cand != usize::MAX && i - cand <= WINDOW && chain < MAX_CHAIN {
                let max = (data.len() - i).min(258);
                let mut l = 0;
                while l < max && data[cand + l] == data[i + l] {
                    l += 1;
                }
                if l > best_len {
                    best_len = l;
                    best_dist = i - cand;
                    if l == max {
                        break;
                    }
                }
                let next = prev[cand % WINDOW];
                // Older entries only: a slot overwritten by a newer position ends the chain.
                if next == usize::MAX || next >= cand {
                    break;
                }
                cand = next;
                chain += 1;
            }
        }
        if best_len >= 3 {
            put_match(&mut w, best_len, best_dist);
            for k in i..i + best_len {
                insert(k, &mut head, &mut prev);
            }
            i += best_len;
        } else {
            put_fixed_symbol(&mut w, u32::from(data[i]));
            insert(i, &mut head, &mut prev);
            i += 1;
        }
    }
    put_fixed_symbol(&mut w, 256); // end of block
    w.finish()
}

/// A zlib stream of `data`: the fixed-code deflate block, or stored blocks if
/// those happen to be smaller (random-looking data).
pub(crate) fn zlib(data: &[u8]) -> Vec<u8> {
    let stored = zlib_stored(data);
    let body = deflate_fixed(data);
    if body.len() + 6 >= stored.len() {
        return stored;
    }
    let mut out = Vec::with_capacity(body.len() + 6);
    out.extend_from_slice(&[0x78, 0x01]);
    out.extend_from_slice(&body);
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
    chunk(&mut out, b"IDAT", &zlib(&raw));
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
    fn compressible_images_shrink_and_still_decode() {
        // Upscaled cells: every row repeated 8 times, runs of 8 equal bytes.
        let palette: Vec<[u8; 3]> = (0..=255u8).map(|i| [i, i, 255 - i]).collect();
        let (w, h) = (512, 512);
        let idx: Vec<u8> = (0..w * h)
            .map(|k| (((k / w) / 8 * 7 + (k % w) / 8 * 13) % 255) as u8)
            .collect();
        let bytes = encode_indexed(w, h, &idx, &palette).expect("valid input");
        assert!(bytes.len() < w * h / 4, "{} bytes", bytes.len());
        let mut decoder = png::Decoder::new(std::io::Cursor::new(bytes));
        decoder.set_transformations(png::Transformations::EXPAND);
        let mut reader = decoder.read_info().expect("header");
        let mut buf = vec![0; reader.output_buffer_size().expect("size")];
        reader.next_frame(&mut buf).expect("frame");
        for (i, &k) in idx.iter().enumerate() {
            assert_eq!(&buf[3 * i..3 * i + 3], &palette[k as usize]);
        }
    }

    #[test]
    fn deflate_output_inflates_to_the_input() {
        // miniz_oxide (the inflater the png crate uses) is the outside reader.
        let mut data = b"abcabcabcabcXYZ".repeat(700);
        data.extend((0..5000u32).map(|i| (i.wrapping_mul(2_654_435_761) >> 24) as u8));
        data.extend(std::iter::repeat_n(7u8, 1000));
        let packed = zlib(&data);
        let back = miniz_oxide::inflate::decompress_to_vec_zlib(&packed).expect("inflate");
        assert_eq!(back, data);
        assert!(packed.len() < data.len());
    }

    proptest::proptest! {
        #![proptest_config(proptest::prelude::ProptestConfig::with_cases(48))]
        #[test]
        fn any_bytes_round_trip_through_zlib(
            data in proptest::collection::vec(proptest::prop_oneof![0u8..4, proptest::num::u8::ANY], 0..20_000),
        ) {
            let back = miniz_oxide::inflate::decompress_to_vec_zlib(&zlib(&data)).expect("inflate");
            proptest::prop_assert_eq!(back, data);
        }
    }

    #[test]
    fn inconsistent_sizes_give_none() {
        assert!(encode_indexed(2, 2, &[0, 0, 0], &[[0, 0, 0]]).is_none());
        assert!(encode_indexed(0, 0, &[], &[[0, 0, 0]]).is_none());
    }
}

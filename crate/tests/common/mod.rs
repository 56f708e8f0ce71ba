//! Helpers shared by the integration tests.

/// One PNG chunk: length, type, data, CRC-32 of type and data (ISO/IEC 15948, section 5.3).
fn chunk(kind: &[u8; 4], data: &[u8]) -> Vec<u8> {
    let mut body = kind.to_vec();
    body.extend_from_slice(data);
    let mut crc = 0xFFFF_FFFFu32;
    for b in &body {
        crc ^= u32::from(*b);
        for _ in 0..8 {
            crc = if crc & 1 != 0 { (crc >> 1) ^ 0xEDB8_8320 } else { crc >> 1 };
        }
    }
    let mut out = (data.len() as u32).to_be_bytes().to_vec();
    out.extend_from_slice(&body);
    out.extend_from_slice(&(!crc).to_be_bytes());
    out
}

/// A well-formed PNG whose header claims w x h 8-bit grey pixels, with a tiny (short) IDAT:
/// what a decompression-bomb file looks like to a decoder that trusts the header.
#[allow(dead_code)]
pub fn png_claiming(w: u32, h: u32) -> Vec<u8> {
    let mut ihdr = w.to_be_bytes().to_vec();
    ihdr.extend_from_slice(&h.to_be_bytes());
    ihdr.extend_from_slice(&[8, 0, 0, 0, 0]);
    let mut out = vec![0x89, b'P', b'N', b'G', 0x0D, 0x0A, 0x1A, 0x0A];
    out.extend(chunk(b"IHDR", &ihdr));
    // zlib stream of an empty deflate block.
    out.extend(chunk(b"IDAT", &[0x78, 0x9C, 0x03, 0x00, 0x00, 0x00, 0x00, 0x01]));
    out.extend(chunk(b"IEND", &[]));
    out
}

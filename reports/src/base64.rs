//! Base64 (RFC 4648, section 4, with padding) for `data:` URIs, so that the
//! HTML report carries its pictures inside the one file.

const ALPHABET: &[u8; 64] = b"ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789+/";

/// Encodes `bytes` as base64 with `=` padding.
pub fn encode(bytes: &[u8]) -> String {
    let mut out = String::with_capacity(bytes.len().div_ceil(3) * 4);
    for chunk in bytes.chunks(3) {
        let b = [
            chunk[0],
            chunk.get(1).copied().unwrap_or(0),
            chunk.get(2).copied().unwrap_or(0),
        ];
        let n = (u32::from(b[0]) << 16) | (u32::from(b[1]) << 8) | u32::from(b[2]);
        let chars = [18, 12, 6, 0].map(|s| ALPHABET[((n >> s) & 63) as usize] as char);
        out.push(chars[0]);
        out.push(chars[1]);
        out.push(if chunk.len() > 1 { chars[2] } else { '=' });
        out.push(if chunk.len() > 2 { chars[3] } else { '=' });
    }
    out
}

/// A `data:` URI of a PNG image.
pub fn png_data_uri(png: &[u8]) -> String {
    format!("data:image/png;base64,{}", encode(png))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rfc_4648_test_vectors() {
        // RFC 4648, section 10 (test vectors).
        for (plain, coded) in [
            ("", ""),
            ("f", "Zg=="),
            ("fo", "Zm8="),
            ("foo", "Zm9v"),
            ("foob", "Zm9vYg=="),
            ("fooba", "Zm9vYmE="),
            ("foobar", "Zm9vYmFy"),
        ] {
            assert_eq!(encode(plain.as_bytes()), coded);
        }
        assert_eq!(encode(&[0xff, 0xfe]), "//4=");
    }
}

//! The guards every request passes: the Host header (against DNS rebinding), the
//! per-session token and same-origin check (against requests from other pages),
//! and sheet ids taken from the URL (against paths outside the site).

use crate::error::{Result, ReviewError};
use std::io::Read;
use std::net::IpAddr;

/// Header carrying the session token on every API request.
pub const TOKEN_HEADER: &str = "X-Symtrust-Token";

/// Shortest token accepted from `--token`.
pub const MIN_TOKEN_LEN: usize = 16;

/// A fresh random session token: 32 hex digits from the operating system's
/// random source.
pub fn new_token() -> Result<String> {
    let path = "/dev/urandom";
    let mut bytes = [0u8; 16];
    std::fs::File::open(path)
        .and_then(|mut f| f.read_exact(&mut bytes))
        .map_err(|source| ReviewError::Random {
            path: path.to_string(),
            source,
        })?;
    Ok(bytes.iter().map(|b| format!("{b:02x}")).collect())
}

/// Checks a token given with `--token`: at least [`MIN_TOKEN_LEN`] characters of
/// letters, digits, `-` or `_` (it travels in a URL and a header unescaped).
pub fn check_token(token: &str) -> Result<()> {
    if token.len() < MIN_TOKEN_LEN
        || !token
            .bytes()
            .all(|b| b.is_ascii_alphanumeric() || b == b'-' || b == b'_')
    {
        return Err(ReviewError::Settings(format!(
            "--token must be at least {MIN_TOKEN_LEN} letters, digits, '-' or '_'"
        )));
    }
    Ok(())
}

/// Compares two tokens in time independent of where they first differ.
pub fn tokens_equal(a: &str, b: &str) -> bool {
    let (a, b) = (a.as_bytes(), b.as_bytes());
    if a.len() != b.len() {
        return false;
    }
    a.iter().zip(b).fold(0u8, |acc, (x, y)| acc | (x ^ y)) == 0
}

/// The Host header values the server answers to: the loopback names with the
/// port, and the bound address when it is not a loopback one.
pub fn allowed_hosts(bind: IpAddr, port: u16) -> Vec<String> {
    let mut hosts = vec![
        format!("127.0.0.1:{port}"),
        format!("localhost:{port}"),
        format!("[::1]:{port}"),
    ];
    if !bind.is_loopback() && !bind.is_unspecified() {
        hosts.push(match bind {
            IpAddr::V4(a) => format!("{a}:{port}"),
            IpAddr::V6(a) => format!("[{a}]:{port}"),
        });
    }
    hosts
}

/// True when `host` (the Host header) is one of `allowed` (case-insensitive).
pub fn host_allowed(host: Option<&str>, allowed: &[String]) -> bool {
    host.is_some_and(|h| allowed.iter().any(|a| a.eq_ignore_ascii_case(h.trim())))
}

/// True when a state-changing request comes from the page itself: an `Origin`
/// header, when sent, names the same host; `Sec-Fetch-Site`, when sent, is
/// `same-origin` or `none`.
pub fn same_origin(origin: Option<&str>, sec_fetch_site: Option<&str>, host: &str) -> bool {
    let origin_ok = origin.is_none_or(|o| o.eq_ignore_ascii_case(&format!("http://{host}")));
    let fetch_ok = sec_fetch_site.is_none_or(|s| s == "same-origin" || s == "none");
    origin_ok && fetch_ok
}

/// Decodes one percent-encoded path segment, once, and accepts it only as a
/// sheet id: 1-64 letters, digits, `_`, `-` or `.`, not starting with a dot. So
/// `..`, `%2e%2e`, `a%2fb`, `%00` and double encodings such as `%252e` (which
/// decode to a `%`) are all refused.
pub fn sheet_id_from_segment(segment: &str) -> Option<String> {
    let decoded = percent_encoding::percent_decode_str(segment)
        .decode_utf8()
        .ok()?;
    symtrust_labels::site::valid_name(&decoded).then(|| decoded.into_owned())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn traversal_in_every_spelling_is_refused() {
        for bad in [
            "..",
            "%2e%2e",
            "%2E%2E",
            "..%2f..%2fsite.toml",
            "a%2fb",
            "a%5cb",
            "a%00",
            "%252e%252e",
            ".hidden",
            "",
            "%",
            "%ff",
            "fp a",
        ] {
            assert_eq!(sheet_id_from_segment(bad), None, "{bad}");
        }
        assert_eq!(
            sheet_id_from_segment("fp-a-0001").as_deref(),
            Some("fp-a-0001")
        );
        assert_eq!(sheet_id_from_segment("fp%2Da").as_deref(), Some("fp-a"));
    }

    #[test]
    fn host_check_takes_loopback_names_with_the_port_only() {
        let allowed = allowed_hosts("127.0.0.1".parse().unwrap(), 8123);
        assert!(host_allowed(Some("127.0.0.1:8123"), &allowed));
        assert!(host_allowed(Some("LOCALHOST:8123"), &allowed));
        assert!(host_allowed(Some("[::1]:8123"), &allowed));
        for bad in [
            "evil.example:8123",
            "127.0.0.1:80",
            "127.0.0.1",
            "localhost.evil:8123",
        ] {
            assert!(!host_allowed(Some(bad), &allowed), "{bad}");
        }
        assert!(!host_allowed(None, &allowed));
        let lan = allowed_hosts("10.1.2.3".parse().unwrap(), 9000);
        assert!(host_allowed(Some("10.1.2.3:9000"), &lan));
    }

    #[test]
    fn origin_and_fetch_metadata() {
        assert!(same_origin(None, None, "127.0.0.1:5"));
        assert!(same_origin(
            Some("http://127.0.0.1:5"),
            Some("same-origin"),
            "127.0.0.1:5"
        ));
        assert!(!same_origin(
            Some("http://evil.example"),
            None,
            "127.0.0.1:5"
        ));
        assert!(!same_origin(None, Some("cross-site"), "127.0.0.1:5"));
    }

    #[test]
    fn tokens() {
        let t = new_token().unwrap();
        assert_eq!(t.len(), 32);
        assert_ne!(t, new_token().unwrap());
        assert!(check_token(&t).is_ok());
        assert!(check_token("short").is_err());
        assert!(check_token("has space in it and long").is_err());
        assert!(
            tokens_equal("abc", "abc") && !tokens_equal("abc", "abd") && !tokens_equal("a", "ab")
        );
    }
}

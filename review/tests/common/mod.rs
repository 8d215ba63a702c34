//! Shared by the review crate's integration tests: a small site made by the
//! synthetic sheet generator, with proposals merged in, and a raw HTTP client
//! (so the tests control every header, Host included).

#![allow(dead_code)]

use std::io::{Read, Write};
use std::net::{SocketAddr, TcpStream};
use std::path::Path;
use symtrust_labels::atomic::write_atomic;
use symtrust_labels::detections::Detection;
use symtrust_labels::document::{Origin, ReviewState, Symbol};
use symtrust_labels::proposals::{MergeOptions, merge_proposals};
use symtrust_labels::raster::encode_png_with_dpi;
use symtrust_labels::sheets::register_sheet;
use symtrust_labels::site::{ClassSpec, Site, SiteConfig};
use symtrust_labels::store::LabelStore;
use symtrust_labels::synth::{self, DraftingStyle, Paper, SynthConfig};

/// Model id of the fixture's proposals.
pub const MODEL: &str = "fixture-model";

/// A site with one A3 sheet of the synthetic plant at 100 dpi (1654 x 1169 px):
/// its first two generator symbols accepted by hand, the next `proposals` symbols
/// proposed by [`MODEL`] with scores falling from 0.95, the rest unlabelled.
pub fn fixture_site(root: &Path, proposals: usize) -> (Site, String) {
    let mut sc = SynthConfig::new(DraftingStyle::A, 11);
    sc.dpi = 100.0;
    let classes: Vec<ClassSpec> = synth::classes(DraftingStyle::A)
        .into_iter()
        .map(|c| ClassSpec {
            name: c.name,
            description: c.description,
            nominal_mm: c.nominal_mm,
            rotatable: c.rotatable,
        })
        .collect();
    let mut config = SiteConfig::new("Quillmoor test unit", classes);
    config.dpi = sc.dpi;
    let site = Site::create(root, config).unwrap();
    let sheet = synth::generate_sheet(&sc, 0, Paper::A3);
    let path = site.sheets_dir().join(format!("{}.png", sheet.id));
    write_atomic(&path, &encode_png_with_dpi(&sheet.image, sc.dpi).unwrap()).unwrap();
    register_sheet(&site, &path).unwrap();
    let store = LabelStore::new(&site);
    let mut doc = store.load(&sheet.id).unwrap();
    assert!(
        sheet.symbols.len() >= 2 + proposals,
        "{} symbols",
        sheet.symbols.len()
    );
    for (i, s) in sheet.symbols.iter().take(2).enumerate() {
        doc.symbols.push(Symbol {
            id: format!("s{:04}", i + 1),
            class: s.class.clone(),
            bbox: s.bbox,
            state: ReviewState::Accepted,
            origin: Origin::Manual,
            by: "ana".into(),
            at: "2026-12-01T08:00:00Z".into(),
        });
    }
    let detections: Vec<Detection> = sheet
        .symbols
        .iter()
        .skip(2)
        .take(proposals)
        .enumerate()
        .map(|(i, s)| Detection {
            sheet: sheet.id.clone(),
            class: s.class.clone(),
            score: 0.95 - 0.1 * i as f64,
            x: s.bbox.x,
            y: s.bbox.y,
            w: s.bbox.w,
            h: s.bbox.h,
        })
        .collect();
    let (doc, sum) = merge_proposals(
        &doc,
        MODEL,
        &detections,
        &MergeOptions::default(),
        "detect",
        "2026-12-01T09:00:00Z",
    )
    .unwrap();
    assert_eq!(sum.added, proposals, "{sum:?}");
    store.save(&doc, "detect").unwrap();
    (site, sheet.id)
}

/// A response: status, headers (lower-case names), body.
#[derive(Debug)]
pub struct Reply {
    /// Status code.
    pub status: u16,
    /// Header lines, names lower-cased.
    pub headers: Vec<(String, String)>,
    /// Body bytes.
    pub body: Vec<u8>,
}

impl Reply {
    /// The value of a header.
    pub fn header(&self, name: &str) -> Option<&str> {
        self.headers
            .iter()
            .find(|(n, _)| n == name)
            .map(|(_, v)| v.as_str())
    }

    /// The body as JSON.
    pub fn json(&self) -> serde_json::Value {
        serde_json::from_slice(&self.body)
            .unwrap_or_else(|e| panic!("{e}: {}", String::from_utf8_lossy(&self.body)))
    }
}

/// Sends one raw request (`head` without the final blank line) and reads the reply.
pub fn raw(addr: SocketAddr, head: &str, body: &[u8]) -> Reply {
    let mut s = TcpStream::connect(addr).unwrap();
    s.set_read_timeout(Some(std::time::Duration::from_secs(20)))
        .unwrap();
    s.write_all(format!("{head}\r\nConnection: close\r\n\r\n").as_bytes())
        .unwrap();
    // A server may refuse before reading the whole body; a broken pipe is fine.
    let _ = s.write_all(body);
    let mut out = Vec::new();
    let _ = s.read_to_end(&mut out);
    let split = out
        .windows(4)
        .position(|w| w == b"\r\n\r\n")
        .unwrap_or_else(|| panic!("no header end in {:?}", String::from_utf8_lossy(&out)));
    let head = String::from_utf8_lossy(&out[..split]).into_owned();
    let mut lines = head.split("\r\n");
    let status = lines
        .next()
        .unwrap()
        .split(' ')
        .nth(1)
        .unwrap()
        .parse()
        .unwrap();
    let headers = lines
        .filter_map(|l| l.split_once(':'))
        .map(|(n, v)| (n.trim().to_ascii_lowercase(), v.trim().to_string()))
        .collect();
    Reply {
        status,
        headers,
        body: out[split + 4..].to_vec(),
    }
}

/// A request with the loopback Host and, when given, the token header.
pub fn request(
    addr: SocketAddr,
    method: &str,
    path: &str,
    token: Option<&str>,
    extra: &[(&str, &str)],
    body: &[u8],
) -> Reply {
    let mut head = format!(
        "{method} {path} HTTP/1.1\r\nHost: 127.0.0.1:{}",
        addr.port()
    );
    if let Some(t) = token {
        head.push_str(&format!("\r\nX-Symtrust-Token: {t}"));
    }
    for (n, v) in extra {
        head.push_str(&format!("\r\n{n}: {v}"));
    }
    if !body.is_empty() || method == "PUT" {
        head.push_str(&format!("\r\nContent-Length: {}", body.len()));
    }
    raw(addr, &head, body)
}

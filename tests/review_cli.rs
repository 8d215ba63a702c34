//! End to end: `symtrust review` on a generated site, driven over HTTP as the
//! page drives it: the printed address, the page, a tile, one save with the
//! session token, the label document on disk.

mod util;

use std::io::{BufRead, BufReader, Read, Write};
use std::net::TcpStream;
use std::process::{Child, Command, Stdio};
use std::time::Duration;
use util::{symtrust, synthetic_site};

/// Kills the server when the test ends, passed or not.
struct Server(Child);

impl Drop for Server {
    fn drop(&mut self) {
        let _ = self.0.kill();
        let _ = self.0.wait();
    }
}

/// One HTTP/1.1 request to 127.0.0.1:`port`; returns status, head and body.
fn http(
    port: u16,
    method: &str,
    path: &str,
    headers: &[(&str, &str)],
    body: &[u8],
) -> (u16, String, Vec<u8>) {
    let mut s = TcpStream::connect(("127.0.0.1", port)).unwrap();
    s.set_read_timeout(Some(Duration::from_secs(30))).unwrap();
    let mut head = format!(
        "{method} {path} HTTP/1.1\r\nHost: 127.0.0.1:{port}\r\nConnection: close\r\nContent-Length: {}\r\n",
        body.len()
    );
    for (n, v) in headers {
        head.push_str(&format!("{n}: {v}\r\n"));
    }
    head.push_str("\r\n");
    s.write_all(head.as_bytes()).unwrap();
    s.write_all(body).unwrap();
    let mut out = Vec::new();
    s.read_to_end(&mut out).unwrap();
    let split = out
        .windows(4)
        .position(|w| w == b"\r\n\r\n")
        .expect("a response head");
    let head = String::from_utf8_lossy(&out[..split]).into_owned();
    let status = head.split(' ').nth(1).unwrap().parse().unwrap();
    (status, head, out[split + 4..].to_vec())
}

#[test]
fn review_serves_the_page_tiles_and_saves_through_the_label_store() {
    let tmp = tempfile::tempdir().unwrap();
    let site = synthetic_site(tmp.path());
    let child = Command::new(env!("CARGO_BIN_EXE_symtrust"))
        .args(["review", "--site", "site", "--port", "0"])
        .current_dir(tmp.path())
        .env("SYMTRUST_USER", "tester")
        .stdout(Stdio::piped())
        .stderr(Stdio::null())
        .spawn()
        .expect("the symtrust binary runs");
    let mut server = Server(child);
    let mut line = String::new();
    BufReader::new(server.0.stdout.take().unwrap())
        .read_line(&mut line)
        .unwrap();
    // The printed address: loopback, the port picked, the session token.
    let url = line.trim();
    let rest = url
        .strip_prefix("http://127.0.0.1:")
        .unwrap_or_else(|| panic!("printed {url:?}"));
    let (port, token) = rest.split_once("/?t=").unwrap();
    let port: u16 = port.parse().unwrap();
    assert!(token.len() >= 16, "{token}");

    let (status, head, page) = http(port, "GET", &format!("/?t={token}"), &[], b"");
    assert_eq!(status, 200, "{head}");
    assert!(String::from_utf8_lossy(&page).contains("<title>symtrust review</title>"));
    assert_eq!(
        http(port, "GET", "/api/sheets", &[], b"").0,
        403,
        "the API needs the token"
    );

    let auth = [("X-Symtrust-Token", token)];
    let json = |path: &str| {
        let (status, head, body) = http(port, "GET", path, &auth, b"");
        assert_eq!(status, 200, "{path}: {head}");
        serde_json::from_slice::<serde_json::Value>(&body).unwrap()
    };
    let sheets = json("/api/sheets");
    let id = sheets["sheets"][0]["id"].as_str().unwrap().to_string();
    assert_eq!(sheets["sheets"].as_array().unwrap().len(), 3);
    let class = json("/api/session")["classes"][0]["name"]
        .as_str()
        .unwrap()
        .to_string();
    let info = json(&format!("/api/sheets/{id}/tiles"));
    let top = info["levels"].as_array().unwrap().len() - 1;
    let (status, head, png) = http(
        port,
        "GET",
        &format!("/api/sheets/{id}/tiles/{top}/0/0"),
        &auth,
        b"",
    );
    assert_eq!(status, 200, "{head}");
    assert!(
        head.to_ascii_lowercase()
            .contains("content-type: image/png")
    );
    // The PNG signature (ISO/IEC 15948, clause 5.2).
    assert_eq!(&png[..8], b"\x89PNG\r\n\x1a\n");

    // One save, as the page sends it: the whole document with a box drawn by
    // hand, at the revision read.
    let mut doc = json(&format!("/api/sheets/{id}"));
    let revision = doc["revision"].as_u64().unwrap();
    doc["symbols"]
        .as_array_mut()
        .unwrap()
        .push(serde_json::json!({
            "id": "h-e2e", "class": class, "box": {"x": 40.0, "y": 50.0, "w": 30.0, "h": 20.0},
            "state": "accepted", "origin": {"kind": "manual"}, "by": "", "at": ""
        }));
    let origin = format!("http://127.0.0.1:{port}");
    let (status, head, body) = http(
        port,
        "PUT",
        &format!("/api/sheets/{id}"),
        &[("X-Symtrust-Token", token), ("Origin", &origin)],
        &serde_json::to_vec(&doc).unwrap(),
    );
    assert_eq!(status, 200, "{head}\n{}", String::from_utf8_lossy(&body));

    let on_disk: serde_json::Value = serde_json::from_slice(
        &std::fs::read(site.join("labels").join(format!("{id}.json"))).unwrap(),
    )
    .unwrap();
    assert_eq!(on_disk["revision"].as_u64(), Some(revision + 1));
    assert_eq!(on_disk["changed_by"], "tester");
    let drawn = on_disk["symbols"]
        .as_array()
        .unwrap()
        .iter()
        .find(|s| s["id"] == "h-e2e")
        .expect("the drawn box is on disk");
    assert_eq!(drawn["by"], "tester");
    assert_eq!(drawn["box"]["w"], 30.0);
    // The same save again is stale now: refused, the document untouched.
    let (status, _, _) = http(
        port,
        "PUT",
        &format!("/api/sheets/{id}"),
        &[("X-Symtrust-Token", token), ("Origin", &origin)],
        &serde_json::to_vec(&doc).unwrap(),
    );
    assert_eq!(status, 409);

    // The server makes the sheets' tile packs in the site's cache folder, apart
    // from the labels, one per sheet, named by the sheet file's hash.
    let packs = site.join("cache/review-tiles");
    let started = std::time::Instant::now();
    while std::fs::read_dir(&packs).map_or(0, |d| {
        d.filter(|e| {
            e.as_ref()
                .unwrap()
                .path()
                .extension()
                .is_some_and(|x| x == "tiles")
        })
        .count()
    }) < 3
    {
        assert!(
            started.elapsed() < Duration::from_secs(120),
            "no tile packs made"
        );
        std::thread::sleep(Duration::from_millis(100));
    }
    assert!(
        server.0.try_wait().unwrap().is_none(),
        "the server still runs"
    );
    drop(server);
}

#[test]
fn review_on_a_lan_address_without_a_token_is_refused() {
    let tmp = tempfile::tempdir().unwrap();
    synthetic_site(tmp.path());
    let run = symtrust(
        tmp.path(),
        &[
            "review", "--site", "site", "--bind", "0.0.0.0", "--port", "0",
        ],
    )
    .expect_code(2);
    assert!(run.stderr.contains("--token"), "{}", run.stderr);
}

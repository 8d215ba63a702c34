//! The review server over real sockets: Host check, token, same-origin check,
//! sheet ids, body limit, saving with the revision check (whole documents and
//! changes), who is recorded, timeouts for slow clients, and tiles (made ahead,
//! kept on disk).

mod common;

use common::{MODEL, fixture_site, raw, request};
use std::io::{Read, Write};
use std::net::TcpStream;
use std::time::{Duration, Instant};
use symtrust_labels::document::{LabelDocument, ReviewState};
use symtrust_labels::proposals::{Outcome, outcome};
use symtrust_labels::sheets::load_sheet;
use symtrust_labels::site::Site;
use symtrust_labels::store::LabelStore;
use symtrust_review::pyramid::Pyramid;
use symtrust_review::server::MAX_BODY_BYTES;
use symtrust_review::tile_cache::{PackedTiles, pack_path};
use symtrust_review::{ReviewServer, ReviewSettings, Timeouts};

fn start(site: symtrust_labels::site::Site) -> ReviewServer {
    ReviewServer::start(site, ReviewSettings::loopback("reviewer-1")).unwrap()
}

#[test]
fn security_guards() {
    let dir = tempfile::tempdir().unwrap();
    let (site, id) = fixture_site(dir.path(), 3);
    let server = start(site);
    let (addr, token) = (server.addr(), server.token().to_string());

    // Host header: a rebinding attacker's name, a wrong port, none at all.
    for host in [
        "evil.example:80",
        &format!("attacker.test:{}", addr.port()),
        "127.0.0.1:1",
    ] {
        let r = raw(
            addr,
            &format!("GET /api/sheets HTTP/1.1\r\nHost: {host}\r\nX-Symtrust-Token: {token}"),
            b"",
        );
        assert_eq!(r.status, 421, "{host}");
    }
    let r = raw(addr, "GET /api/sheets HTTP/1.0", b"");
    assert_eq!(r.status, 421, "no Host header");
    let r = raw(
        addr,
        &format!(
            "GET /api/sheets HTTP/1.1\r\nHost: localhost:{}\r\nX-Symtrust-Token: {token}",
            addr.port()
        ),
        b"",
    );
    assert_eq!(r.status, 200, "localhost is allowed");

    // Token: the page needs ?t=, the API the header.
    assert_eq!(request(addr, "GET", "/", None, &[], b"").status, 403);
    assert_eq!(
        request(addr, "GET", "/?t=wrong", None, &[], b"").status,
        403
    );
    let page = request(addr, "GET", &format!("/?t={token}"), None, &[], b"");
    assert_eq!(page.status, 200);
    let csp = page.header("content-security-policy").unwrap();
    assert!(
        csp.contains("default-src 'none'") && csp.contains("connect-src 'self'"),
        "{csp}"
    );
    assert_eq!(page.header("referrer-policy"), Some("no-referrer"));
    assert_eq!(
        request(addr, "GET", "/api/sheets", None, &[], b"").status,
        403
    );
    assert_eq!(
        request(
            addr,
            "GET",
            "/api/sheets",
            Some("0123456789abcdef0123456789abcdef"),
            &[],
            b""
        )
        .status,
        403
    );
    let list = request(addr, "GET", "/api/sheets", Some(&token), &[], b"");
    assert_eq!(list.status, 200);
    let sheets = list.json()["sheets"].as_array().unwrap().clone();
    assert_eq!(sheets.len(), 1);
    assert_eq!(sheets[0]["proposals"], 3);
    assert_eq!(sheets[0]["accepted"], 2);
    assert_eq!(sheets[0]["reviewed"], false);

    // Sheet ids: traversal in plain, percent-encoded and double-encoded spellings.
    for path in [
        "/api/sheets/..",
        "/api/sheets/%2e%2e",
        "/api/sheets/..%2f..%2fsite.toml",
        "/api/sheets/..%2F..%2Fsite.toml/tiles",
        "/api/sheets/%252e%252e",
        "/api/sheets/a%00b",
        "/api/sheets/%2fetc%2fpasswd",
        "/api/sheets/.lock",
    ] {
        let r = request(addr, "GET", path, Some(&token), &[], b"");
        assert_eq!(
            r.status,
            400,
            "{path}: {}",
            String::from_utf8_lossy(&r.body)
        );
    }
    let r = request(
        addr,
        "GET",
        "/api/sheets/not-a-sheet",
        Some(&token),
        &[],
        b"",
    );
    assert_eq!(r.status, 404);
    let r = request(
        addr,
        "GET",
        "/api/sheets/../../site.toml",
        Some(&token),
        &[],
        b"",
    );
    assert!(r.status == 400 || r.status == 404, "{}", r.status);
    assert!(!String::from_utf8_lossy(&r.body).contains("schema_version ="));

    // A state-changing request from another page (foreign Origin) is refused.
    let doc = request(
        addr,
        "GET",
        &format!("/api/sheets/{id}"),
        Some(&token),
        &[],
        b"",
    );
    let body = doc.body.clone();
    let r = request(
        addr,
        "PUT",
        &format!("/api/sheets/{id}"),
        Some(&token),
        &[("Origin", "http://evil.example")],
        &body,
    );
    assert_eq!(r.status, 403);
    let r = request(
        addr,
        "PUT",
        &format!("/api/sheets/{id}"),
        Some(&token),
        &[("Sec-Fetch-Site", "cross-site")],
        &body,
    );
    assert_eq!(r.status, 403);
    let r = request(addr, "PUT", &format!("/api/sheets/{id}"), None, &[], &body);
    assert_eq!(r.status, 403, "no token");

    // Body limit: announced too large, and too large in fact.
    let r = raw(
        addr,
        &format!(
            "PUT /api/sheets/{id} HTTP/1.1\r\nHost: 127.0.0.1:{}\r\nX-Symtrust-Token: {token}\r\nContent-Length: {}",
            addr.port(),
            MAX_BODY_BYTES + 1
        ),
        b"{",
    );
    assert_eq!(r.status, 413);
    let big = vec![b' '; MAX_BODY_BYTES + 10];
    let r = request(
        addr,
        "PUT",
        &format!("/api/sheets/{id}"),
        Some(&token),
        &[],
        &big,
    );
    assert_eq!(r.status, 413);
    // Nothing above changed the document.
    let store = LabelStore::at(&dir.path().join("labels"));
    assert_eq!(store.load(&id).unwrap().revision, 2);
    server.stop();
}

#[test]
fn save_round_trip_and_conflict() {
    let dir = tempfile::tempdir().unwrap();
    let (site, id) = fixture_site(dir.path(), 3);
    let store = LabelStore::new(&site);
    let server = start(site);
    let (addr, token) = (server.addr(), server.token().to_string());
    let path = format!("/api/sheets/{id}");
    let origin = format!("http://127.0.0.1:{}", addr.port());
    let hdr = [
        ("Origin", origin.as_str()),
        ("Sec-Fetch-Site", "same-origin"),
    ];

    let got: LabelDocument =
        serde_json::from_value(request(addr, "GET", &path, Some(&token), &[], b"").json()).unwrap();
    assert_eq!(got, store.load(&id).unwrap());

    // Accept one proposal, correct another (moved 3 px), reject the third.
    let mut edit = got.clone();
    let props: Vec<usize> = (0..edit.symbols.len())
        .filter(|&i| edit.symbols[i].state == ReviewState::Draft)
        .collect();
    edit.symbols[props[0]].state = ReviewState::Accepted;
    edit.symbols[props[1]].bbox.x -= 3.0;
    edit.symbols[props[1]].state = ReviewState::Accepted;
    edit.symbols[props[2]].state = ReviewState::Rejected;
    let r = request(
        addr,
        "PUT",
        &path,
        Some(&token),
        &hdr,
        &serde_json::to_vec(&edit).unwrap(),
    );
    assert_eq!(r.status, 200, "{}", String::from_utf8_lossy(&r.body));
    assert_eq!(r.json()["revision"], 3);
    let disk = store.load(&id).unwrap();
    assert_eq!(disk.revision, 3);
    assert_eq!(r.json()["changed_at"], disk.changed_at.as_str());
    assert_eq!(disk.changed_by, "reviewer-1");
    let outcomes: Vec<Outcome> = props.iter().map(|&i| outcome(&disk.symbols[i])).collect();
    assert_eq!(
        outcomes,
        [
            Outcome::AcceptedUnchanged,
            Outcome::Corrected,
            Outcome::Rejected
        ]
    );
    assert!(props.iter().all(|&i| disk.symbols[i].by == "reviewer-1"));
    assert_eq!(
        disk.symbols[0].by, "ana",
        "untouched symbols keep their author"
    );

    // A second tab still at the old revision is refused with who saved the new one.
    let r = request(
        addr,
        "PUT",
        &path,
        Some(&token),
        &hdr,
        &serde_json::to_vec(&got).unwrap(),
    );
    assert_eq!(r.status, 409);
    let j = r.json();
    assert_eq!(j["conflict"]["revision"], 3);
    assert_eq!(j["conflict"]["changed_by"], "reviewer-1");
    assert!(j["error"].as_str().unwrap().contains("revision 3"));
    assert_eq!(
        store.load(&id).unwrap(),
        disk,
        "the refused save changed nothing"
    );

    // The page cannot turn a hand-drawn box into a proposal, nor send garbage.
    let mut forged = disk.clone();
    forged.symbols[0].origin = symtrust_labels::document::Origin::Proposed {
        model: MODEL.into(),
        score: 1.0,
        proposed_class: None,
        proposed_box: None,
    };
    let r = request(
        addr,
        "PUT",
        &path,
        Some(&token),
        &hdr,
        &serde_json::to_vec(&forged).unwrap(),
    );
    assert_eq!(r.status, 400);
    let r = request(
        addr,
        "PUT",
        &path,
        Some(&token),
        &hdr,
        b"{\"schema_version\": 1",
    );
    assert_eq!(r.status, 400);
    assert_eq!(store.load(&id).unwrap().revision, 3);
    server.stop();
}

#[test]
fn tiles_cover_the_sheet() {
    let dir = tempfile::tempdir().unwrap();
    let (site, id) = fixture_site(dir.path(), 1);
    let store = LabelStore::new(&site);
    let doc = store.load(&id).unwrap();
    let server = start(site);
    let (addr, token) = (server.addr(), server.token().to_string());
    let info = request(
        addr,
        "GET",
        &format!("/api/sheets/{id}/tiles"),
        Some(&token),
        &[],
        b"",
    )
    .json();
    let levels = info["levels"].as_array().unwrap();
    assert_eq!(
        levels[0],
        serde_json::json!([doc.sheet.width, doc.sheet.height])
    );
    let tile = info["tile"].as_u64().unwrap() as u32;
    let last = levels.len() - 1;
    let r = request(
        addr,
        "GET",
        &format!("/api/sheets/{id}/tiles/{last}/0/0"),
        Some(&token),
        &[],
        b"",
    );
    assert_eq!(r.status, 200);
    assert_eq!(r.header("content-type"), Some("image/png"));
    let img = image::load_from_memory(&r.body).unwrap();
    let (w, h) = (
        levels[last][0].as_u64().unwrap() as u32,
        levels[last][1].as_u64().unwrap() as u32,
    );
    assert_eq!((img.width(), img.height()), (w, h));
    assert!(w <= tile && h <= tile);
    let r = request(
        addr,
        "GET",
        &format!("/api/sheets/{id}/tiles/0/99/0"),
        Some(&token),
        &[],
        b"",
    );
    assert_eq!(r.status, 404);
    let r = request(
        addr,
        "GET",
        &format!("/api/sheets/{id}/tiles/x/0/0"),
        Some(&token),
        &[],
        b"",
    );
    assert_eq!(r.status, 400);
    server.stop();
}

#[test]
fn a_lan_address_needs_a_token() {
    let dir = tempfile::tempdir().unwrap();
    let (site, _) = fixture_site(dir.path(), 0);
    let err = ReviewServer::start(
        site,
        ReviewSettings {
            bind: "0.0.0.0".parse().unwrap(),
            ..ReviewSettings::loopback("x")
        },
    )
    .err()
    .unwrap();
    assert!(err.to_string().contains("--token"), "{err}");
}

fn start_with(site: symtrust_labels::site::Site, timeouts: Timeouts) -> ReviewServer {
    ReviewServer::start(
        site,
        ReviewSettings {
            timeouts,
            ..ReviewSettings::loopback("reviewer-1")
        },
    )
    .unwrap()
}

#[test]
fn stalled_clients_are_cut_off() {
    let dir = tempfile::tempdir().unwrap();
    let (site, id) = fixture_site(dir.path(), 3);
    let short = Duration::from_millis(400);
    let server = start_with(
        site,
        Timeouts {
            header: short,
            body: short,
        },
    );
    let (addr, token) = (server.addr(), server.token().to_string());

    // Sends `text` and stops there, then reads until the server closes the
    // connection (the client gives up after 10 s): what came back, and when.
    let stall = |text: String| {
        let mut s = TcpStream::connect(addr).unwrap();
        s.set_read_timeout(Some(Duration::from_secs(10))).unwrap();
        s.write_all(text.as_bytes()).unwrap();
        let t = Instant::now();
        let mut buf = Vec::new();
        let n = s.read_to_end(&mut buf);
        assert!(n.is_ok(), "the server did not close the connection: {n:?}");
        (String::from_utf8_lossy(&buf).into_owned(), t.elapsed())
    };
    let host = format!("Host: 127.0.0.1:{}", addr.port());

    // A head that never ends (the slow-headers attack): the connection is
    // closed after the head timeout, long before the client's own 10 s.
    let (_, took) = stall(format!("GET /api/sheets HTTP/1.1\r\n{host}\r\n"));
    assert!(took < Duration::from_secs(5), "{took:?}");

    // A body that stops half way: 408, and nothing saved.
    let (text, took) = stall(format!(
        "PUT /api/sheets/{id} HTTP/1.1\r\n{host}\r\nX-Symtrust-Token: {token}\r\nContent-Length: 1000\r\n\r\n{{\"schema"
    ));
    assert!(text.starts_with("HTTP/1.1 408"), "{text}");
    assert!(took < Duration::from_secs(5), "{took:?}");
    let store = LabelStore::at(&dir.path().join("labels"));
    assert_eq!(store.load(&id).unwrap().revision, 2);

    // An idle keep-alive connection is closed too, and a prompt client is
    // still served.
    let mut s = TcpStream::connect(addr).unwrap();
    s.set_read_timeout(Some(Duration::from_secs(10))).unwrap();
    let t = Instant::now();
    assert_eq!(s.read(&mut [0u8; 16]).unwrap(), 0);
    assert!(t.elapsed() < Duration::from_secs(5));
    assert_eq!(
        request(addr, "GET", "/api/sheets", Some(&token), &[], b"").status,
        200
    );
    server.stop();
}

#[test]
fn changes_are_attributed_to_the_named_reviewer() {
    let dir = tempfile::tempdir().unwrap();
    let (site, id) = fixture_site(dir.path(), 3);
    let store = LabelStore::new(&site);
    let server = start(site);
    let (addr, token) = (server.addr(), server.token().to_string());
    let path = format!("/api/sheets/{id}");
    let disk = store.load(&id).unwrap();
    let draft = disk
        .symbols
        .iter()
        .position(|s| s.state == ReviewState::Draft)
        .unwrap();
    let changes = |revision: u64, state: &str| {
        let mut s = serde_json::to_value(&disk.symbols[draft]).unwrap();
        s["state"] = state.into();
        serde_json::to_vec(&serde_json::json!({
            "revision": revision, "symbols": [s], "removed": [], "ignore": []
        }))
        .unwrap()
    };
    // Bad names are refused with a reason and change nothing.
    for bad in [&"x".repeat(65), "ana%0Aevil", "%20", "%FF"] {
        let r = request(
            addr,
            "PATCH",
            &path,
            Some(&token),
            &[("X-Symtrust-Reviewer", bad)],
            &changes(2, "accepted"),
        );
        assert_eq!(r.status, 400, "{bad}");
        assert!(
            r.json()["error"]
                .as_str()
                .unwrap()
                .contains("reviewer name")
        );
    }
    assert_eq!(store.load(&id).unwrap().revision, 2);
    // "Zoë Park" percent-encoded as the page's encodeURIComponent sends it.
    let r = request(
        addr,
        "PATCH",
        &path,
        Some(&token),
        &[("X-Symtrust-Reviewer", "Zo%C3%AB%20Park")],
        &changes(2, "accepted"),
    );
    assert_eq!(r.status, 200, "{}", String::from_utf8_lossy(&r.body));
    let after = store.load(&id).unwrap();
    assert_eq!(after.revision, 3);
    assert_eq!(after.changed_by, "Zoë Park");
    assert_eq!(after.symbols[draft].by, "Zoë Park");
    assert_eq!(after.symbols[draft].state, ReviewState::Accepted);
    // The other symbols keep who decided them.
    for (a, b) in after.symbols.iter().zip(&disk.symbols) {
        if a.id != disk.symbols[draft].id {
            assert_eq!((&a.by, &a.at), (&b.by, &b.at));
        }
    }
    // No name: the server's user. A change based on an old revision: 409.
    let r = request(
        addr,
        "PATCH",
        &path,
        Some(&token),
        &[],
        &changes(3, "rejected"),
    );
    assert_eq!(r.status, 200);
    assert_eq!(store.load(&id).unwrap().symbols[draft].by, "reviewer-1");
    let r = request(
        addr,
        "PATCH",
        &path,
        Some(&token),
        &[],
        &changes(3, "draft"),
    );
    assert_eq!(r.status, 409);
    assert_eq!(r.json()["conflict"]["changed_by"], "reviewer-1");
    server.stop();
}

#[test]
fn patches_add_and_remove_and_are_checked_like_documents() {
    let dir = tempfile::tempdir().unwrap();
    let (site, id) = fixture_site(dir.path(), 3);
    let store = LabelStore::new(&site);
    let server = start(site);
    let (addr, token) = (server.addr(), server.token().to_string());
    let path = format!("/api/sheets/{id}");
    let disk = store.load(&id).unwrap();
    let manual = disk.symbols[0].id.clone();
    let class = disk.symbols[0].class.clone();
    let new_box = |x: f64| {
        serde_json::json!({
            "id": "h-new", "class": class, "box": {"x": x, "y": 10.0, "w": 20.0, "h": 20.0},
            "state": "accepted", "origin": {"kind": "manual"}, "by": "", "at": ""
        })
    };
    let body = serde_json::to_vec(&serde_json::json!({
        "revision": 2, "symbols": [new_box(10.0)], "removed": [manual], "ignore": []
    }))
    .unwrap();
    let r = request(addr, "PATCH", &path, Some(&token), &[], &body);
    assert_eq!(r.status, 200, "{}", String::from_utf8_lossy(&r.body));
    let after = store.load(&id).unwrap();
    assert_eq!(after.symbols.len(), disk.symbols.len());
    assert!(after.symbol(&manual).is_none());
    assert_eq!(after.symbols.last().unwrap().id, "h-new");
    assert_eq!(after.symbols.last().unwrap().by, "reviewer-1");
    // A box outside the sheet, an unknown field: refused, nothing saved.
    let outside = serde_json::to_vec(&serde_json::json!({
        "revision": 3, "symbols": [new_box(1e6)], "removed": [], "ignore": []
    }))
    .unwrap();
    let r = request(addr, "PATCH", &path, Some(&token), &[], &outside);
    assert_eq!(r.status, 400);
    assert!(r.json()["error"].as_str().unwrap().contains("outside"));
    let extra = br#"{"revision": 3, "symbols": [], "removed": [], "ignore": [], "sheet": {}}"#;
    assert_eq!(
        request(addr, "PATCH", &path, Some(&token), &[], extra).status,
        400
    );
    assert_eq!(store.load(&id).unwrap().revision, 3);
    // From another origin: refused like a PUT.
    let r = request(
        addr,
        "PATCH",
        &path,
        Some(&token),
        &[("Origin", "http://evil.example")],
        &body,
    );
    assert_eq!(r.status, 403);
    server.stop();
}

#[test]
fn tiles_are_made_ahead_and_kept_on_disk_for_the_next_start() {
    let dir = tempfile::tempdir().unwrap();
    let (site, id) = fixture_site(dir.path(), 3);
    let record = LabelStore::new(&site).load(&id).unwrap().sheet;
    let expected = Pyramid::build(load_sheet(&site, &record).unwrap());
    let pack = pack_path(dir.path(), &record.sha256).unwrap();
    assert!(
        pack.starts_with(dir.path().join("cache")),
        "{}",
        pack.display()
    );
    let server = start(site.clone());
    // Made by the thread the server starts, without any request.
    let t = Instant::now();
    while !pack.exists() {
        assert!(t.elapsed() < Duration::from_secs(60), "no tile pack made");
        std::thread::sleep(Duration::from_millis(50));
    }
    server.stop();
    let note = std::fs::read_to_string(pack.parent().unwrap().join("README.txt")).unwrap();
    assert!(note.contains("Nothing here is label data"), "{note}");
    let stored = PackedTiles::load(&pack).expect("a valid pack");
    assert_eq!(stored.info(), &expected.info());
    // A new server answers from the pack, even with the sheet file gone (so it
    // did not decode it), with the same bytes as the pyramid built here.
    let sheet_file = dir.path().join(&record.file);
    let kept = std::fs::read(&sheet_file).unwrap();
    std::fs::remove_file(&sheet_file).unwrap();
    let server = ReviewServer::start(
        site,
        ReviewSettings {
            prepare_tiles: false,
            ..ReviewSettings::loopback("reviewer-1")
        },
    )
    .unwrap();
    let (addr, token) = (server.addr(), server.token().to_string());
    let top = expected.info().levels.len() - 1;
    for (l, c, r) in [(0, 1, 1), (top, 0, 0)] {
        let got = request(
            addr,
            "GET",
            &format!("/api/sheets/{id}/tiles/{l}/{c}/{r}"),
            Some(&token),
            &[],
            b"",
        );
        assert_eq!(got.status, 200);
        assert_eq!(got.body, expected.tile_png(l, c, r).unwrap(), "{l}/{c}/{r}");
    }
    server.stop();
    // A damaged pack is not used: with the sheet back, the tiles are built
    // from it again.
    std::fs::write(&sheet_file, kept).unwrap();
    std::fs::write(&pack, b"symtrust review tiles 1\n{").unwrap();
    let server = ReviewServer::start(
        Site::open(dir.path()).unwrap(),
        ReviewSettings {
            prepare_tiles: false,
            ..ReviewSettings::loopback("reviewer-1")
        },
    )
    .unwrap();
    let (addr, token) = (server.addr(), server.token().to_string());
    let got = request(
        addr,
        "GET",
        &format!("/api/sheets/{id}/tiles/0/1/1"),
        Some(&token),
        &[],
        b"",
    );
    assert_eq!(got.status, 200);
    assert_eq!(got.body, expected.tile_png(0, 1, 1).unwrap());
    let t = Instant::now();
    while PackedTiles::load(&pack).is_none() {
        assert!(
            t.elapsed() < Duration::from_secs(60),
            "the pack was not made again"
        );
        std::thread::sleep(Duration::from_millis(50));
    }
    server.stop();
}

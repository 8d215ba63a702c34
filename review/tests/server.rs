//! The review server over real sockets: Host check, token, same-origin check,
//! sheet ids, body limit, saving with the revision check, and tiles.

mod common;

use common::{MODEL, fixture_site, raw, request};
use symtrust_labels::document::{LabelDocument, ReviewState};
use symtrust_labels::proposals::{Outcome, outcome};
use symtrust_labels::store::LabelStore;
use symtrust_review::server::MAX_BODY_BYTES;
use symtrust_review::{ReviewServer, ReviewSettings};

fn start(site: symtrust_labels::site::Site) -> ReviewServer {
    ReviewServer::start(
        site,
        ReviewSettings {
            bind: "127.0.0.1".parse().unwrap(),
            port: 0,
            token: None,
            user: "reviewer-1".into(),
        },
    )
    .unwrap()
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
            port: 0,
            token: None,
            user: "x".into(),
        },
    )
    .err()
    .unwrap();
    assert!(err.to_string().contains("--token"), "{err}");
}

//! The HTTP server: a few worker threads over `tiny_http`, one page and a small
//! JSON API.
//!
//! | request | answer |
//! |---|---|
//! | `GET /?t=TOKEN` | the page (self-contained: inline script and style, no other origin) |
//! | `GET /api/session` | site name, user, classes |
//! | `GET /api/sheets` | every sheet's progress |
//! | `GET /api/sheets/ID` | the label document |
//! | `PUT /api/sheets/ID` | save the document sent (revision checked); the saved one, or 409 |
//! | `GET /api/sheets/ID/tiles` | pyramid sizes |
//! | `GET /api/sheets/ID/tiles/L/C/R` | one PNG tile |
//!
//! Every request must carry an allowed Host header; every API request the session
//! token in the [`TOKEN_HEADER`] header, and a `PUT` also a same-origin `Origin`
//! or `Sec-Fetch-Site` when the browser sends them. Bodies are limited to
//! [`MAX_BODY_BYTES`].

use crate::edits::accept_page_edit;
use crate::error::{Result, ReviewError};
use crate::pyramid::Pyramid;
use crate::security::{
    TOKEN_HEADER, allowed_hosts, check_token, host_allowed, new_token, same_origin,
    sheet_id_from_segment, tokens_equal,
};
use crate::summary::all_progress;
use serde_json::json;
use std::io::{Cursor, Read};
use std::net::{IpAddr, SocketAddr};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, Mutex, OnceLock};
use std::thread::JoinHandle;
use symtrust_labels::LabelError;
use symtrust_labels::clock::now_rfc3339;
use symtrust_labels::document::{LabelDocument, SheetRecord};
use symtrust_labels::sheets::load_sheet;
use symtrust_labels::site::Site;
use symtrust_labels::store::LabelStore;
use tiny_http::{Header, Method, Request, Response};

/// Largest request body accepted (a label document of some 20,000 symbols).
pub const MAX_BODY_BYTES: usize = 8 * 1024 * 1024;

/// Worker threads answering requests (tiles load in parallel).
const WORKERS: usize = 6;

/// Sheets whose pyramids are kept in memory.
const PYRAMIDS_KEPT: usize = 3;

/// The page, built into the binary.
pub const PAGE_HTML: &str = include_str!("../page/index.html");

/// How the server is started.
#[derive(Debug, Clone)]
pub struct ReviewSettings {
    /// Address to listen on (127.0.0.1 unless the user asks otherwise).
    pub bind: IpAddr,
    /// Port; 0 picks a free one.
    pub port: u16,
    /// Access token; required for an address that is not loopback. A fresh
    /// random one is made when `None`.
    pub token: Option<String>,
    /// Who the saved changes are attributed to.
    pub user: String,
}

type PyramidSlot = Arc<OnceLock<std::result::Result<Arc<Pyramid>, String>>>;
type PyramidCache = Vec<(SheetRecord, PyramidSlot)>;

struct State {
    site: Site,
    store: LabelStore,
    classes: Vec<String>,
    token: String,
    hosts: Vec<String>,
    user: String,
    pyramids: Mutex<PyramidCache>,
}

/// A running review server; stops on [`ReviewServer::stop`].
pub struct ReviewServer {
    server: Arc<tiny_http::Server>,
    workers: Vec<JoinHandle<()>>,
    stopping: Arc<AtomicBool>,
    addr: SocketAddr,
    bind: IpAddr,
    token: String,
}

impl ReviewServer {
    /// Opens the socket and starts the workers.
    pub fn start(site: Site, settings: ReviewSettings) -> Result<Self> {
        let token = match &settings.token {
            Some(t) => {
                check_token(t)?;
                t.clone()
            }
            None if settings.bind.is_loopback() => new_token()?,
            None => {
                return Err(ReviewError::Settings(format!(
                    "listening on {} (not loopback) needs --token T: anyone who can reach the address could otherwise change labels",
                    settings.bind
                )));
            }
        };
        let want = SocketAddr::new(settings.bind, settings.port);
        let server = tiny_http::Server::http(want).map_err(|e| ReviewError::Listen {
            addr: want.to_string(),
            message: e.to_string(),
        })?;
        let addr = server
            .server_addr()
            .to_ip()
            .ok_or_else(|| ReviewError::Listen {
                addr: want.to_string(),
                message: "not an IP socket".to_string(),
            })?;
        let state = Arc::new(State {
            store: LabelStore::new(&site),
            classes: site.config.class_names(),
            site,
            token: token.clone(),
            hosts: allowed_hosts(settings.bind, addr.port()),
            user: settings.user,
            pyramids: Mutex::new(Vec::new()),
        });
        let server = Arc::new(server);
        let stopping = Arc::new(AtomicBool::new(false));
        let workers = (0..WORKERS)
            .map(|_| {
                let server = Arc::clone(&server);
                let state = Arc::clone(&state);
                let stopping = Arc::clone(&stopping);
                std::thread::spawn(move || {
                    while !stopping.load(Ordering::SeqCst) {
                        if let Ok(rq) = server.recv() {
                            handle(&state, rq);
                        }
                    }
                })
            })
            .collect();
        Ok(Self {
            server,
            workers,
            stopping,
            addr,
            bind: settings.bind,
            token,
        })
    }

    /// The socket address listened on.
    pub fn addr(&self) -> SocketAddr {
        self.addr
    }

    /// The session token.
    pub fn token(&self) -> &str {
        &self.token
    }

    /// The address to open in a browser, token included.
    pub fn url(&self) -> String {
        let host = if self.bind.is_loopback() || self.bind.is_unspecified() {
            format!("127.0.0.1:{}", self.addr.port())
        } else {
            self.addr.to_string()
        };
        format!("http://{host}/?t={}", self.token)
    }

    /// Blocks until the server stops (it runs until the process ends).
    pub fn wait(self) {
        for w in self.workers {
            let _ = w.join();
        }
    }

    /// Stops the workers and closes the socket.
    pub fn stop(self) {
        self.stopping.store(true, Ordering::SeqCst);
        for _ in 0..self.workers.len() {
            self.server.unblock();
        }
        for w in self.workers {
            let _ = w.join();
        }
    }
}

type Reply = Response<Cursor<Vec<u8>>>;

fn header(name: &str, value: &str) -> Header {
    Header::from_bytes(name.as_bytes(), value.as_bytes()).expect("static header is valid")
}

fn reply(status: u16, content_type: &str, body: Vec<u8>) -> Reply {
    Response::from_data(body)
        .with_status_code(status)
        .with_header(header("Content-Type", content_type))
        .with_header(header("Cache-Control", "no-store"))
        .with_header(header("X-Content-Type-Options", "nosniff"))
        .with_header(header("Referrer-Policy", "no-referrer"))
        .with_header(header("X-Frame-Options", "DENY"))
}

fn json_reply(status: u16, value: &serde_json::Value) -> Reply {
    reply(
        status,
        "application/json",
        serde_json::to_vec(value).expect("JSON values serialise"),
    )
}

fn error_reply(status: u16, message: impl Into<String>) -> Reply {
    json_reply(status, &json!({ "error": message.into() }))
}

fn header_value<'a>(rq: &'a Request, name: &str) -> Option<&'a str> {
    rq.headers()
        .iter()
        .find(|h| h.field.as_str().as_str().eq_ignore_ascii_case(name))
        .map(|h| h.value.as_str())
}

fn handle(state: &State, mut rq: Request) {
    let response = route(state, &mut rq);
    let _ = rq.respond(response);
}

fn route(state: &State, rq: &mut Request) -> Reply {
    let host = header_value(rq, "Host").map(str::to_string);
    if !host_allowed(host.as_deref(), &state.hosts) {
        return error_reply(
            421,
            format!(
                "unknown Host {:?}; open the address symtrust review printed",
                host.unwrap_or_default()
            ),
        );
    }
    let host = host.unwrap_or_default();
    let url = rq.url().to_string();
    let (path, query) = url.split_once('?').unwrap_or((url.as_str(), ""));
    let segments: Vec<&str> = path.trim_start_matches('/').split('/').collect();
    let method = rq.method().clone();
    if segments == [""] {
        if method != Method::Get {
            return error_reply(405, "only GET is allowed here");
        }
        let given = query
            .split('&')
            .filter_map(|kv| kv.split_once('='))
            .find(|(k, _)| *k == "t")
            .map(|(_, v)| v);
        if !given.is_some_and(|t| tokens_equal(t, &state.token)) {
            return reply(
                403,
                "text/plain; charset=utf-8",
                b"This address needs the access token: open the full address that `symtrust review` printed (it ends in ?t=...).\n".to_vec(),
            );
        }
        return reply(
            200,
            "text/html; charset=utf-8",
            PAGE_HTML.as_bytes().to_vec(),
        )
        .with_header(header(
            "Content-Security-Policy",
            "default-src 'none'; script-src 'unsafe-inline'; style-src 'unsafe-inline'; \
                 img-src 'self' blob: data:; connect-src 'self'; base-uri 'none'; \
                 form-action 'none'; frame-ancestors 'none'",
        ));
    }
    if segments[0] != "api" {
        return error_reply(404, format!("no such page {path:?}"));
    }
    if !header_value(rq, TOKEN_HEADER).is_some_and(|t| tokens_equal(t, &state.token)) {
        return error_reply(
            403,
            format!("missing or wrong {TOKEN_HEADER}; reload the page from the printed address"),
        );
    }
    match (&method, &segments[1..]) {
        (Method::Get, ["session"]) => json_reply(
            200,
            &json!({
                "site": state.site.config.name,
                "user": state.user,
                "classes": state.site.config.classes.iter().map(|c| json!({
                    "name": c.name, "description": c.description
                })).collect::<Vec<_>>(),
                "max_body_bytes": MAX_BODY_BYTES,
            }),
        ),
        (Method::Get, ["sheets"]) => match all_progress(&state.store) {
            Ok(list) => json_reply(200, &json!({ "sheets": list })),
            Err(e) => error_reply(500, e.to_string()),
        },
        (_, ["sheets", seg, rest @ ..]) => {
            let Some(id) = sheet_id_from_segment(seg) else {
                return error_reply(
                    400,
                    "a sheet id is 1-64 letters, digits, '_', '-' or '.', not starting with a dot",
                );
            };
            if !state.store.exists(&id) {
                return error_reply(404, format!("no sheet {id:?} in this site"));
            }
            match (&method, rest) {
                (Method::Get, []) => match state.store.load(&id) {
                    Ok(doc) => {
                        warm_pyramid(state, &doc);
                        json_reply(
                            200,
                            &serde_json::to_value(&doc).expect("documents serialise"),
                        )
                    }
                    Err(e) => error_reply(500, e.to_string()),
                },
                (Method::Put, []) => {
                    if !same_origin(
                        header_value(rq, "Origin"),
                        header_value(rq, "Sec-Fetch-Site"),
                        &host,
                    ) {
                        return error_reply(403, "changes are accepted from the review page only");
                    }
                    save(state, &id, rq)
                }
                (Method::Get, ["tiles"]) => match pyramid(state, &id) {
                    Ok(p) => json_reply(200, &serde_json::to_value(p.info()).expect("serialises")),
                    Err(e) => error_reply(500, e),
                },
                (Method::Get, ["tiles", l, c, r]) => {
                    let (Ok(l), Ok(c), Ok(r)) = (l.parse::<usize>(), c.parse(), r.parse()) else {
                        return error_reply(400, "tile address is /tiles/LEVEL/COL/ROW in numbers");
                    };
                    match pyramid(state, &id) {
                        Ok(p) => match p.tile_png(l, c, r) {
                            Some(png) => reply(200, "image/png", png.to_vec()),
                            None => error_reply(404, "no such tile"),
                        },
                        Err(e) => error_reply(500, e),
                    }
                }
                (Method::Get | Method::Put, _) => error_reply(404, "no such resource"),
                _ => error_reply(405, "method not allowed"),
            }
        }
        (Method::Get, _) => error_reply(404, "no such resource"),
        _ => error_reply(405, "method not allowed"),
    }
}

fn read_body(rq: &mut Request) -> std::result::Result<Vec<u8>, Reply> {
    let too_big = || {
        error_reply(
            413,
            format!("request body over the limit of {MAX_BODY_BYTES} bytes"),
        )
    };
    if rq.body_length().is_some_and(|n| n > MAX_BODY_BYTES) {
        return Err(too_big());
    }
    let mut body = Vec::new();
    rq.as_reader()
        .take(MAX_BODY_BYTES as u64 + 1)
        .read_to_end(&mut body)
        .map_err(|e| error_reply(400, format!("reading the request body: {e}")))?;
    if body.len() > MAX_BODY_BYTES {
        return Err(too_big());
    }
    Ok(body)
}

fn conflict(revision: u64, sent: u64, changed_by: &str, changed_at: &str) -> Reply {
    json_reply(
        409,
        &json!({
            "error": format!(
                "the sheet changed since you loaded it: it is at revision {revision} (you had {sent}), saved by {changed_by} at {changed_at}"
            ),
            "conflict": { "revision": revision, "changed_by": changed_by, "changed_at": changed_at },
        }),
    )
}

fn save(state: &State, id: &str, rq: &mut Request) -> Reply {
    let body = match read_body(rq) {
        Ok(b) => b,
        Err(r) => return r,
    };
    let incoming: LabelDocument = match serde_json::from_slice(&body) {
        Ok(d) => d,
        Err(e) => return error_reply(400, format!("the document sent is not valid: {e}")),
    };
    if incoming.sheet.id != id {
        return error_reply(
            400,
            format!(
                "the document is for sheet {:?}, not {id:?}",
                incoming.sheet.id
            ),
        );
    }
    let on_disk = match state.store.load(id) {
        Ok(d) => d,
        Err(e) => return error_reply(500, e.to_string()),
    };
    if on_disk.revision != incoming.revision {
        return conflict(
            on_disk.revision,
            incoming.revision,
            &on_disk.changed_by,
            &on_disk.changed_at,
        );
    }
    let doc = match accept_page_edit(
        &on_disk,
        incoming,
        &state.classes,
        &state.user,
        &now_rfc3339(),
    ) {
        Ok(d) => d,
        Err(message) => return error_reply(400, message),
    };
    match state.store.save(&doc, &state.user) {
        Ok(saved) => json_reply(
            200,
            &serde_json::to_value(&saved).expect("documents serialise"),
        ),
        Err(LabelError::StaleRevision {
            expected,
            found,
            changed_by,
            changed_at,
            ..
        }) => conflict(found, expected, &changed_by, &changed_at),
        Err(e) => error_reply(500, e.to_string()),
    }
}

fn load_pyramid(site: &Site, sheet: &SheetRecord) -> std::result::Result<Arc<Pyramid>, String> {
    load_sheet(site, sheet)
        .map(|img| Arc::new(Pyramid::build(img)))
        .map_err(|e| e.to_string())
}

/// The cache slot of a sheet's pyramid: found by id (most recently used last),
/// or made from `sheet` when given; `None` when absent and no record was given.
fn pyramid_slot(
    state: &State,
    id: &str,
    sheet: Option<&SheetRecord>,
) -> Option<(SheetRecord, PyramidSlot)> {
    let mut cache = state.pyramids.lock().unwrap_or_else(|p| p.into_inner());
    if let Some(pos) = cache
        .iter()
        .position(|(rec, _)| rec.id == id && sheet.is_none_or(|s| s == rec))
    {
        let entry = cache.remove(pos);
        cache.push(entry.clone());
        return Some(entry);
    }
    let sheet = sheet?;
    cache.retain(|(rec, _)| rec.id != id);
    if cache.len() >= PYRAMIDS_KEPT {
        cache.remove(0);
    }
    let entry = (sheet.clone(), PyramidSlot::default());
    cache.push(entry.clone());
    Some(entry)
}

fn pyramid(state: &State, id: &str) -> std::result::Result<Arc<Pyramid>, String> {
    let (sheet, slot) = match pyramid_slot(state, id, None) {
        Some(entry) => entry,
        None => {
            let doc = state.store.load(id).map_err(|e| e.to_string())?;
            pyramid_slot(state, id, Some(&doc.sheet)).expect("a record was given")
        }
    };
    slot.get_or_init(|| load_pyramid(&state.site, &sheet))
        .clone()
}

/// Starts building the pyramid of a sheet whose document was just read, so the
/// first tiles are ready sooner.
fn warm_pyramid(state: &State, doc: &LabelDocument) {
    let (sheet, slot) =
        pyramid_slot(state, &doc.sheet.id, Some(&doc.sheet)).expect("a record was given");
    if slot.get().is_some() {
        return;
    }
    let site = state.site.clone();
    std::thread::spawn(move || {
        slot.get_or_init(|| load_pyramid(&site, &sheet));
    });
}

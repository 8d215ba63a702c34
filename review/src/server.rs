//! The HTTP server (axum on a small tokio runtime of its own): one page and a
//! small JSON API.
//!
//! | request | answer |
//! |---|---|
//! | `GET /?t=TOKEN` | the page (self-contained: inline script and style, no other origin) |
//! | `GET /api/session` | site name, user, classes |
//! | `GET /api/sheets` | every sheet's progress |
//! | `GET /api/sheets/ID` | the label document |
//! | `PUT /api/sheets/ID` | save the document sent (revision checked); the new revision, or 409 |
//! | `PATCH /api/sheets/ID` | the same with only the changes: a [`Changes`] body |
//! | `GET /api/sheets/ID/tiles` | pyramid sizes |
//! | `GET /api/sheets/ID/tiles/L/C/R` | one PNG tile |
//!
//! Every request must carry an allowed Host header; every API request the session
//! token in the [`TOKEN_HEADER`] header, and a save also a same-origin `Origin`
//! or `Sec-Fetch-Site` when the browser sends them. A save may name the
//! reviewer in [`REVIEWER_HEADER`] (see [`crate::edits::reviewer_name`]); without
//! it changes are attributed to the user the server runs as. Bodies are limited
//! to [`MAX_BODY_BYTES`].
//!
//! A connection that sends no complete request head within
//! [`Timeouts::header`] is closed (idle keep-alive connections too), and a body
//! that does not arrive within [`Timeouts::body`] is answered 408, so slow or
//! stalled clients cannot hold the server's connections.
//!
//! When the server starts, a thread makes the tiles of every sheet ahead of use
//! ([`TileStore::prepare_all`]).

use crate::edits::{accept_page_edit, reviewer_name};
use crate::error::{Result, ReviewError};
use crate::security::{
    TOKEN_HEADER, allowed_hosts, check_token, host_allowed, new_token, same_origin,
    sheet_id_from_segment, tokens_equal,
};
use crate::sheet_tiles::TileStore;
use crate::summary::all_progress;
use axum::http::Method;
use serde_json::json;
use std::convert::Infallible;
use std::net::{IpAddr, SocketAddr};
use std::sync::Arc;
use std::thread::JoinHandle;
use std::time::Duration;
use symtrust_labels::LabelError;
use symtrust_labels::clock::now_rfc3339;
use symtrust_labels::document::{IgnoreRegion, LabelDocument, Symbol};
use symtrust_labels::site::Site;
use symtrust_labels::store::LabelStore;

/// Largest request body accepted (a label document of some 20,000 symbols).
pub const MAX_BODY_BYTES: usize = 8 * 1024 * 1024;

/// Threads of the async runtime (saving and tiles run on its blocking pool).
const WORKERS: usize = 6;

/// Header naming the reviewer of a save (percent-encoded UTF-8).
pub const REVIEWER_HEADER: &str = "X-Symtrust-Reviewer";

/// The page, built into the binary.
pub const PAGE_HTML: &str = include_str!("../page/index.html");

/// The body of a `PATCH`: what the page changed since the revision it read.
/// Applied to the document on disk at that revision, it gives the document the
/// page holds; then it is checked and saved exactly as a `PUT` of that document.
/// At 5,000 boxes it is a few hundred bytes where the whole document is a
/// megabyte, which keeps saving off the page's key path.
#[derive(Debug, Clone, serde::Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Changes {
    /// The revision the page read.
    pub revision: u64,
    /// Symbols added or changed: each replaces the symbol of its id, or is
    /// added at the end.
    pub symbols: Vec<Symbol>,
    /// Ids of symbols deleted.
    pub removed: Vec<String>,
    /// The whole list of ignore regions.
    pub ignore: Vec<IgnoreRegion>,
}

impl Changes {
    /// The document `base` becomes with these changes.
    pub fn apply(self, base: &LabelDocument) -> LabelDocument {
        let mut doc = base.clone();
        doc.revision = self.revision;
        doc.symbols.retain(|s| !self.removed.contains(&s.id));
        for s in self.symbols {
            match doc.symbols.iter_mut().find(|o| o.id == s.id) {
                Some(slot) => *slot = s,
                None => doc.symbols.push(s),
            }
        }
        doc.ignore = self.ignore;
        doc
    }
}

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
    /// Who the saved changes are attributed to when the page names nobody.
    pub user: String,
    /// Limits on slow clients.
    pub timeouts: Timeouts,
    /// Make every sheet's tiles when the server starts (otherwise on first
    /// request).
    pub prepare_tiles: bool,
}

impl ReviewSettings {
    /// Loopback, a free port, a fresh token, default timeouts, tiles made ahead.
    pub fn loopback(user: &str) -> Self {
        Self {
            bind: IpAddr::from([127, 0, 0, 1]),
            port: 0,
            token: None,
            user: user.to_string(),
            timeouts: Timeouts::default(),
            prepare_tiles: true,
        }
    }
}

/// How long the server waits for a slow client.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Timeouts {
    /// For the head of a request (request line and headers), counted from the
    /// connection's start or the end of its previous request.
    pub header: Duration,
    /// For the whole body of a request once its head is read.
    pub body: Duration,
}

impl Default for Timeouts {
    fn default() -> Self {
        Self {
            header: Duration::from_secs(15),
            body: Duration::from_secs(30),
        }
    }
}

struct State {
    site: Site,
    store: LabelStore,
    classes: Vec<String>,
    token: String,
    hosts: Vec<String>,
    user: String,
    tiles: TileStore,
}

/// A running review server; stops on [`ReviewServer::stop`].
pub struct ReviewServer {
    thread: JoinHandle<()>,
    stop: tokio::sync::oneshot::Sender<()>,
    addr: SocketAddr,
    bind: IpAddr,
    token: String,
}

impl ReviewServer {
    /// Opens the socket and starts serving on a thread of its own.
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
        let listen_err = |e: std::io::Error| ReviewError::Listen {
            addr: want.to_string(),
            message: e.to_string(),
        };
        let listener = std::net::TcpListener::bind(want).map_err(listen_err)?;
        listener.set_nonblocking(true).map_err(listen_err)?;
        let addr = listener.local_addr().map_err(listen_err)?;
        let state = Arc::new(State {
            store: LabelStore::new(&site),
            classes: site.config.class_names(),
            tiles: TileStore::new(site.clone()),
            site,
            token: token.clone(),
            hosts: allowed_hosts(settings.bind, addr.port()),
            user: settings.user,
        });
        let runtime = tokio::runtime::Builder::new_multi_thread()
            .worker_threads(WORKERS)
            .enable_io()
            .enable_time()
            .build()
            .map_err(listen_err)?;
        let listener = {
            let _guard = runtime.enter();
            tokio::net::TcpListener::from_std(listener).map_err(listen_err)?
        };
        if settings.prepare_tiles {
            let state = Arc::clone(&state);
            std::thread::spawn(move || state.tiles.prepare_all(&state.store));
        }
        let (stop, stopped) = tokio::sync::oneshot::channel::<()>();
        let timeouts = settings.timeouts;
        let thread = std::thread::spawn(move || {
            runtime.block_on(accept_loop(listener, state, timeouts, stopped));
        });
        Ok(Self {
            thread,
            stop,
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
        let _ = self.thread.join();
    }

    /// Stops serving and closes the socket (a save in progress still reaches
    /// the disk).
    pub fn stop(self) {
        let _ = self.stop.send(());
        let _ = self.thread.join();
    }
}

/// A request as the routes see it: everything read, the body within the limit.
struct Incoming {
    method: Method,
    path_and_query: String,
    headers: Vec<(String, String)>,
    /// The body, or `None` when it was over [`MAX_BODY_BYTES`].
    body: Option<Vec<u8>>,
}

/// A response as the routes make it.
struct Reply {
    status: u16,
    headers: Vec<(&'static str, String)>,
    body: Vec<u8>,
}

impl Reply {
    fn with_header(mut self, name: &'static str, value: &str) -> Self {
        self.headers.push((name, value.to_string()));
        self
    }
}

/// Accepts connections until `stopped`, each served by hyper's HTTP/1 with the
/// head timeout on tokio's timer.
async fn accept_loop(
    listener: tokio::net::TcpListener,
    state: Arc<State>,
    timeouts: Timeouts,
    mut stopped: tokio::sync::oneshot::Receiver<()>,
) {
    loop {
        let stream = tokio::select! {
            _ = &mut stopped => return,
            accepted = listener.accept() => match accepted {
                Ok((stream, _)) => stream,
                // Out of file descriptors and the like: wait a little, go on.
                Err(_) => {
                    tokio::time::sleep(Duration::from_millis(50)).await;
                    continue;
                }
            },
        };
        let state = Arc::clone(&state);
        tokio::spawn(async move {
            let service =
                hyper::service::service_fn(move |rq: hyper::Request<hyper::body::Incoming>| {
                    let state = Arc::clone(&state);
                    async move {
                        Ok::<_, Infallible>(
                            serve(state, rq.map(axum::body::Body::new), timeouts.body).await,
                        )
                    }
                });
            let _ = hyper::server::conn::http1::Builder::new()
                .timer(hyper_util::rt::TokioTimer::new())
                .header_read_timeout(timeouts.header)
                .serve_connection(hyper_util::rt::TokioIo::new(stream), service)
                .await;
        });
    }
}

async fn serve(
    state: Arc<State>,
    rq: axum::extract::Request,
    body_timeout: Duration,
) -> axum::response::Response {
    let (parts, body) = rq.into_parts();
    let announced_too_big = parts
        .headers
        .get("content-length")
        .and_then(|v| v.to_str().ok())
        .and_then(|v| v.parse::<u64>().ok())
        .is_some_and(|n| n > MAX_BODY_BYTES as u64);
    let body = if announced_too_big {
        None
    } else {
        match tokio::time::timeout(body_timeout, axum::body::to_bytes(body, MAX_BODY_BYTES)).await {
            Ok(read) => read.ok().map(|b| b.to_vec()),
            Err(_) => {
                let late = error_reply(
                    408,
                    format!(
                        "the request body did not arrive within {} s",
                        body_timeout.as_secs_f64()
                    ),
                )
                .with_header("connection", "close");
                return into_response(late);
            }
        }
    };
    let incoming = Incoming {
        method: parts.method.clone(),
        path_and_query: parts
            .uri
            .path_and_query()
            .map_or_else(|| parts.uri.path().to_string(), |p| p.as_str().to_string()),
        headers: parts
            .headers
            .iter()
            .filter_map(|(n, v)| Some((n.as_str().to_string(), v.to_str().ok()?.to_string())))
            .collect(),
        body,
    };
    // Saving takes a file lock and fsyncs; decoding a sheet takes a while: both
    // run off the async workers.
    let reply = tokio::task::spawn_blocking(move || route(&state, &incoming))
        .await
        .unwrap_or_else(|e| error_reply(500, format!("internal error: {e}")));
    into_response(reply)
}

fn into_response(reply: Reply) -> axum::response::Response {
    let mut response = axum::response::Response::new(axum::body::Body::from(reply.body));
    *response.status_mut() = axum::http::StatusCode::from_u16(reply.status)
        .unwrap_or(axum::http::StatusCode::INTERNAL_SERVER_ERROR);
    let h = response.headers_mut();
    for (name, value) in reply.headers {
        if let Ok(v) = axum::http::HeaderValue::from_str(&value) {
            h.append(name, v);
        }
    }
    response
}

fn reply(status: u16, content_type: &str, body: Vec<u8>) -> Reply {
    Reply {
        status,
        headers: vec![
            ("content-type", content_type.to_string()),
            ("cache-control", "no-store".to_string()),
            ("x-content-type-options", "nosniff".to_string()),
            ("referrer-policy", "no-referrer".to_string()),
            ("x-frame-options", "DENY".to_string()),
        ],
        body,
    }
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

fn header_value<'a>(rq: &'a Incoming, name: &str) -> Option<&'a str> {
    rq.headers
        .iter()
        .find(|(n, _)| n.eq_ignore_ascii_case(name))
        .map(|(_, v)| v.as_str())
}

fn route(state: &Arc<State>, rq: &Incoming) -> Reply {
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
    let url = rq.path_and_query.clone();
    let (path, query) = url.split_once('?').unwrap_or((url.as_str(), ""));
    let segments: Vec<&str> = path.trim_start_matches('/').split('/').collect();
    let method = rq.method.clone();
    if segments == [""] {
        if method != Method::GET {
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
        .with_header(
            "content-security-policy",
            "default-src 'none'; script-src 'unsafe-inline'; style-src 'unsafe-inline'; \
                 img-src 'self' blob: data:; connect-src 'self'; base-uri 'none'; \
                 form-action 'none'; frame-ancestors 'none'",
        );
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
    match (method.as_str(), &segments[1..]) {
        ("GET", ["session"]) => json_reply(
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
        ("GET", ["sheets"]) => match all_progress(&state.store) {
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
            match (method.as_str(), rest) {
                ("GET", []) => match state.store.load(&id) {
                    Ok(doc) => {
                        warm_tiles(state, &doc);
                        json_reply(
                            200,
                            &serde_json::to_value(&doc).expect("documents serialise"),
                        )
                    }
                    Err(e) => error_reply(500, e.to_string()),
                },
                ("PUT" | "PATCH", []) => {
                    if !same_origin(
                        header_value(rq, "Origin"),
                        header_value(rq, "Sec-Fetch-Site"),
                        &host,
                    ) {
                        return error_reply(403, "changes are accepted from the review page only");
                    }
                    save(state, &id, rq)
                }
                ("GET", ["tiles"]) => match sheet_tiles(state, &id) {
                    Ok(p) => json_reply(200, &serde_json::to_value(p.info()).expect("serialises")),
                    Err(e) => error_reply(500, e),
                },
                ("GET", ["tiles", l, c, r]) => {
                    let (Ok(l), Ok(c), Ok(r)) = (l.parse::<usize>(), c.parse(), r.parse()) else {
                        return error_reply(400, "tile address is /tiles/LEVEL/COL/ROW in numbers");
                    };
                    match sheet_tiles(state, &id) {
                        Ok(p) => match p.tile_png(l, c, r) {
                            Some(png) => reply(200, "image/png", png),
                            None => error_reply(404, "no such tile"),
                        },
                        Err(e) => error_reply(500, e),
                    }
                }
                ("GET" | "PUT", _) => error_reply(404, "no such resource"),
                _ => error_reply(405, "method not allowed"),
            }
        }
        ("GET", _) => error_reply(404, "no such resource"),
        _ => error_reply(405, "method not allowed"),
    }
}

fn read_body(rq: &Incoming) -> std::result::Result<&[u8], Reply> {
    rq.body.as_deref().ok_or_else(|| {
        error_reply(
            413,
            format!("request body over the limit of {MAX_BODY_BYTES} bytes"),
        )
    })
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

fn save(state: &State, id: &str, rq: &Incoming) -> Reply {
    let body = match read_body(rq) {
        Ok(b) => b,
        Err(r) => return r,
    };
    let who = match header_value(rq, REVIEWER_HEADER) {
        None => state.user.clone(),
        Some(given) => match reviewer_name(given) {
            Ok(name) => name,
            Err(why) => return error_reply(400, why),
        },
    };
    let on_disk = match state.store.load(id) {
        Ok(d) => d,
        Err(e) => return error_reply(500, e.to_string()),
    };
    let incoming: LabelDocument = if rq.method == Method::PATCH {
        match serde_json::from_slice::<Changes>(body) {
            Ok(c) if c.revision == on_disk.revision => c.apply(&on_disk),
            Ok(c) => {
                return conflict(
                    on_disk.revision,
                    c.revision,
                    &on_disk.changed_by,
                    &on_disk.changed_at,
                );
            }
            Err(e) => return error_reply(400, format!("the changes sent are not valid: {e}")),
        }
    } else {
        match serde_json::from_slice(body) {
            Ok(d) => d,
            Err(e) => return error_reply(400, format!("the document sent is not valid: {e}")),
        }
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
    if on_disk.revision != incoming.revision {
        return conflict(
            on_disk.revision,
            incoming.revision,
            &on_disk.changed_by,
            &on_disk.changed_at,
        );
    }
    let doc = match accept_page_edit(&on_disk, incoming, &state.classes, &who, &now_rfc3339()) {
        Ok(d) => d,
        Err(message) => return error_reply(400, message),
    };
    match state.store.save(&doc, &who) {
        Ok(saved) => json_reply(
            200,
            &json!({
                "revision": saved.revision,
                "changed_by": saved.changed_by,
                "changed_at": saved.changed_at,
            }),
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

fn sheet_tiles(state: &State, id: &str) -> std::result::Result<crate::sheet_tiles::Tiles, String> {
    state.tiles.tiles_by_id(id, || {
        state
            .store
            .load(id)
            .map(|doc| doc.sheet)
            .map_err(|e| e.to_string())
    })
}

/// Starts making the tiles of a sheet whose document was just read, unless they
/// are ready, so the first tiles come sooner.
fn warm_tiles(state: &Arc<State>, doc: &LabelDocument) {
    if state.tiles.is_packed(&doc.sheet) {
        return;
    }
    let (state, sheet) = (Arc::clone(state), doc.sheet.clone());
    std::thread::spawn(move || {
        let _ = state.tiles.tiles(&sheet);
    });
}

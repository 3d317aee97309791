//! The local HTTP server: the tablet UI (the `ui/` folder, embedded in the
//! binary) and a JSON API over the operation set, `POST /api/<operation>`.
//!
//! Security (docs/methods.md §10.3): it binds 127.0.0.1 unless LAN mode is
//! asked for; every request's `Host` must be one of the server's own names
//! (DNS rebinding) and a browser's `Origin`, when sent, must be the server
//! itself (cross-site requests); API calls accept only `application/json`;
//! LAN mode requires a random token on every API call. All errors use one
//! JSON shape: `{"error": {"code", "message", "field", "value"}}`.

use std::net::SocketAddr;
use std::sync::Arc;

use axum::Router;
use axum::body::Bytes;
use axum::extract::{Path, Request, State};
use axum::http::{HeaderMap, HeaderValue, StatusCode, header};
use axum::middleware::{self, Next};
use axum::response::{IntoResponse, Response};
use axum::routing::{get, post};
use rust_embed::RustEmbed;
use serde_json::{Value as Json, json};

use fieldcage_ops::{Problem, ProblemCode, Service};

/// The tablet UI, embedded (also in debug builds, so tests see what ships).
#[derive(RustEmbed)]
#[folder = "../../ui/"]
struct Ui;

/// Who may talk to the server.
#[derive(Debug, Clone)]
pub struct Guard {
    /// `Host` values accepted (`127.0.0.1:8088`, `localhost:8088`, …);
    /// empty in LAN mode, where the token protects the API.
    pub hosts: Vec<String>,
    /// LAN mode token, required on API calls when set.
    pub token: Option<String>,
}

impl Guard {
    /// The guard of a server bound to loopback on `port`.
    pub fn loopback(port: u16) -> Guard {
        Guard {
            hosts: vec![
                format!("127.0.0.1:{port}"),
                format!("localhost:{port}"),
                format!("[::1]:{port}"),
            ],
            token: None,
        }
    }

    /// The guard of a server on the local network, with a fresh random token.
    pub fn lan() -> Guard {
        let token = format!(
            "{}{}",
            uuid::Uuid::new_v4().simple(),
            uuid::Uuid::new_v4().simple()
        );
        Guard {
            hosts: Vec::new(),
            token: Some(token),
        }
    }
}

#[derive(Clone)]
struct AppState {
    service: Arc<Service>,
    guard: Arc<Guard>,
}

/// The whole application: UI files and API, behind the guard.
pub fn router(service: Arc<Service>, guard: Guard) -> Router {
    let state = AppState {
        service,
        guard: Arc::new(guard),
    };
    Router::new()
        .route("/api/{op}", post(api))
        .route("/", get(|| async { asset("index.html") }))
        .route(
            "/{*path}",
            get(|Path(path): Path<String>| async move { asset(&path) }),
        )
        .layer(middleware::from_fn_with_state(state.clone(), guard_layer))
        .with_state(state)
}

/// Bind and serve until Ctrl-C.
pub async fn serve(service: Arc<Service>, addr: SocketAddr, guard: Guard) -> std::io::Result<()> {
    let listener = tokio::net::TcpListener::bind(addr).await?;
    axum::serve(listener, router(service, guard))
        .with_graceful_shutdown(async {
            let _ = tokio::signal::ctrl_c().await;
        })
        .await
}

fn problem_response(status: StatusCode, problem: Problem) -> Response {
    debug_assert_eq!(status, status_of(problem.code));
    (status, axum::Json(json!({ "error": problem }))).into_response()
}

/// The HTTP status of each kind of problem: the one place it is decided.
fn status_of(code: ProblemCode) -> StatusCode {
    match code {
        ProblemCode::BadRequest => StatusCode::BAD_REQUEST,
        ProblemCode::InvalidValue => StatusCode::UNPROCESSABLE_ENTITY,
        ProblemCode::NotFound | ProblemCode::UnknownOperation => StatusCode::NOT_FOUND,
        ProblemCode::Conflict | ProblemCode::DeviceClash => StatusCode::CONFLICT,
        ProblemCode::TargetUnavailable => StatusCode::SERVICE_UNAVAILABLE,
        ProblemCode::ForbiddenHost | ProblemCode::ForbiddenOrigin => StatusCode::FORBIDDEN,
        ProblemCode::Unauthorized => StatusCode::UNAUTHORIZED,
        ProblemCode::UnsupportedMediaType => StatusCode::UNSUPPORTED_MEDIA_TYPE,
        ProblemCode::Internal => StatusCode::INTERNAL_SERVER_ERROR,
    }
}

fn refuse(code: ProblemCode, message: String, field: Option<&str>) -> Response {
    problem_response(
        status_of(code),
        Problem {
            code,
            message,
            field: field.map(str::to_owned),
            value: None,
        },
    )
}

async fn guard_layer(State(state): State<AppState>, request: Request, next: Next) -> Response {
    let guard = &state.guard;
    let headers = request.headers();
    let host = headers
        .get(header::HOST)
        .and_then(|h| h.to_str().ok())
        .unwrap_or("");
    if !guard.hosts.is_empty() && !guard.hosts.iter().any(|h| h.eq_ignore_ascii_case(host)) {
        return refuse(
            ProblemCode::ForbiddenHost,
            format!(
                "requests must be addressed to this device ({}), not {host:?}",
                guard.hosts.join(", ")
            ),
            Some("Host"),
        );
    }
    if let Some(origin) = headers.get(header::ORIGIN) {
        let origin = origin.to_str().unwrap_or("");
        let own = format!("http://{host}");
        if !origin.eq_ignore_ascii_case(&own) {
            return refuse(
                ProblemCode::ForbiddenOrigin,
                format!("requests from {origin:?} are not accepted; open fieldcage at {own}"),
                Some("Origin"),
            );
        }
    }
    let is_api = request.uri().path().starts_with("/api/");
    if is_api && let Some(token) = &guard.token {
        let given = headers
            .get(header::AUTHORIZATION)
            .and_then(|h| h.to_str().ok())
            .and_then(|h| h.strip_prefix("Bearer "));
        if given != Some(token.as_str()) {
            return refuse(
                ProblemCode::Unauthorized,
                "LAN mode: open the address with the token that fieldcage serve printed".to_owned(),
                Some("Authorization"),
            );
        }
    }
    let mut response = next.run(request).await;
    let h = response.headers_mut();
    h.insert(
        header::CONTENT_SECURITY_POLICY,
        HeaderValue::from_static(
            "default-src 'self'; img-src 'self' data:; style-src 'self'; script-src 'self'; \
             connect-src 'self'; object-src 'none'; base-uri 'none'; frame-ancestors 'none'",
        ),
    );
    h.insert(
        header::X_CONTENT_TYPE_OPTIONS,
        HeaderValue::from_static("nosniff"),
    );
    h.insert(
        header::REFERRER_POLICY,
        HeaderValue::from_static("no-referrer"),
    );
    h.insert(header::CACHE_CONTROL, HeaderValue::from_static("no-store"));
    response
}

/// `POST /api/<op>` with a JSON body.
async fn api(
    State(state): State<AppState>,
    Path(op): Path<String>,
    headers: HeaderMap,
    body: Bytes,
) -> Response {
    let json_type = headers
        .get(header::CONTENT_TYPE)
        .and_then(|h| h.to_str().ok())
        .map(|t| {
            t.split(';')
                .next()
                .unwrap_or("")
                .trim()
                .eq_ignore_ascii_case("application/json")
        })
        .unwrap_or(false);
    if !json_type {
        return refuse(
            ProblemCode::UnsupportedMediaType,
            "send the request body as application/json".to_owned(),
            Some("Content-Type"),
        );
    }
    let args: Json = if body.is_empty() {
        json!({})
    } else {
        match serde_json::from_slice(&body) {
            Ok(v) => v,
            Err(e) => {
                return refuse(
                    ProblemCode::BadRequest,
                    format!("the body is not JSON: {e}"),
                    None,
                );
            }
        }
    };
    let service = state.service.clone();
    let result = tokio::task::spawn_blocking(move || service.call(&op, args)).await;
    match result {
        Ok(Ok(value)) => (StatusCode::OK, axum::Json(value)).into_response(),
        Ok(Err(problem)) => problem_response(status_of(problem.code), problem),
        Err(e) => refuse(
            ProblemCode::Internal,
            format!("the operation failed: {e}"),
            None,
        ),
    }
}

fn asset(path: &str) -> Response {
    match Ui::get(path) {
        Some(file) => {
            let mime = file.metadata.mimetype().to_owned();
            ([(header::CONTENT_TYPE, mime)], file.data).into_response()
        }
        None => refuse(ProblemCode::NotFound, format!("no file {path:?}"), None),
    }
}

/// Every file of the embedded UI with its size in bytes.
pub fn ui_files() -> Vec<(String, usize)> {
    Ui::iter()
        .map(|name| {
            let size = Ui::get(&name).map_or(0, |f| f.data.len());
            (name.into_owned(), size)
        })
        .collect()
}

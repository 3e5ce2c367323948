//! The dashboard's files, embedded from the repository's `web/` folder at build time: `/` is
//! `web/index.html`, any other file by its path, with its content type and an ETag from its content
//! hash (answered with 304 when the browser has it). Nothing is read from disk or the internet at run time.

use std::collections::HashMap;
use std::hash::{DefaultHasher, Hash, Hasher};
use std::sync::OnceLock;

use axum::Router;
use axum::http::{HeaderMap, HeaderValue, StatusCode, header};
use axum::response::{IntoResponse, Response};
use axum::routing::get;
use include_dir::{Dir, include_dir};

use super::{ApiError, AppState};

static WEB: Dir<'static> = include_dir!("$CARGO_MANIFEST_DIR/../web");

/// Content type by file extension.
pub(crate) fn content_type(path: &str) -> &'static str {
    match path.rsplit('.').next().unwrap_or("").to_ascii_lowercase().as_str() {
        "html" | "htm" => "text/html; charset=utf-8",
        "css" => "text/css; charset=utf-8",
        "js" | "mjs" => "text/javascript; charset=utf-8",
        "json" | "map" => "application/json",
        "svg" => "image/svg+xml",
        "png" => "image/png",
        "ico" => "image/x-icon",
        "woff2" => "font/woff2",
        "txt" | "md" => "text/plain; charset=utf-8",
        _ => "application/octet-stream",
    }
}

/// Each file's ETag: a hash of its bytes, computed once.
fn etags() -> &'static HashMap<String, String> {
    static TAGS: OnceLock<HashMap<String, String>> = OnceLock::new();
    TAGS.get_or_init(|| {
        let mut tags = HashMap::new();
        let mut stack = vec![&WEB];
        while let Some(dir) = stack.pop() {
            for file in dir.files() {
                let mut hasher = DefaultHasher::new();
                file.contents().hash(&mut hasher);
                tags.insert(file.path().to_string_lossy().into_owned(), format!("\"{:016x}\"", hasher.finish()));
            }
            stack.extend(dir.dirs());
        }
        tags
    })
}

fn serve(path: &str, headers: &HeaderMap) -> Result<Response, ApiError> {
    if path.split('/').any(|part| part == ".." || part.starts_with('.')) {
        return Err(ApiError::NotFound(format!("no file {path}")));
    }
    let file = WEB.get_file(path).ok_or_else(|| ApiError::NotFound(format!("no file /{path}")))?;
    let etag = etags().get(path).cloned().unwrap_or_default();
    let cached = headers.get(header::IF_NONE_MATCH).and_then(|v| v.to_str().ok()).is_some_and(|v| v == etag);
    let mut response = if cached {
        StatusCode::NOT_MODIFIED.into_response()
    } else {
        ([(header::CONTENT_TYPE, content_type(path))], file.contents()).into_response()
    };
    if let Ok(value) = HeaderValue::from_str(&etag) {
        response.headers_mut().insert(header::ETAG, value);
    }
    response.headers_mut().insert(header::CACHE_CONTROL, HeaderValue::from_static("no-cache"));
    Ok(response)
}

async fn index(headers: HeaderMap) -> Result<Response, ApiError> {
    serve("index.html", &headers)
}

/// Every path no route claims: a GET for a file under `web/` serves it, anything else is 404.
pub(super) async fn fallback(
    method: axum::http::Method,
    uri: axum::http::Uri,
    headers: HeaderMap,
) -> Result<Response, ApiError> {
    let path = uri.path().trim_start_matches('/');
    if (method == axum::http::Method::GET || method == axum::http::Method::HEAD)
        && !path.is_empty()
        && !path.starts_with("api/")
    {
        serve(path, &headers)
    } else {
        Err(ApiError::NotFound(format!("no route {} {}", method, uri.path())))
    }
}

pub(super) fn router() -> Router<AppState> {
    Router::new().route("/", get(index))
}

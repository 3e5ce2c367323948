//! Request bodies: JSON only, at most 64 KiB, unknown fields refused. Every failure becomes an
//! [`ApiError`] naming the field and what is allowed; a handler sees only a fully parsed value.

use axum::body::Bytes;
use axum::extract::{FromRequest, Request};
use axum::http::header;
use serde::de::DeserializeOwned;

use super::ApiError;

/// Largest request body accepted.
const MAX_BODY_BYTES: usize = 64 * 1024;

/// A JSON request body of type `T` (which should be `deny_unknown_fields`). With `OPTIONAL`, an empty
/// body is `None`.
pub(crate) struct JsonBody<T>(pub(crate) T);

/// A JSON body that may be left out entirely.
pub(crate) struct OptionalJsonBody<T>(pub(crate) Option<T>);

/// The key that precedes byte `offset` in `text`: the last `"name":` before it (for type errors,
/// whose serde message does not name the field).
fn key_before(text: &str, offset: usize) -> Option<String> {
    let before = &text[..offset.min(text.len())];
    let colon = before.rfind(':')?;
    let head = before[..colon].trim_end().strip_suffix('"')?;
    let start = head.rfind('"')?;
    Some(head[start + 1..].to_string())
}

fn between_backticks(message: &str) -> Option<String> {
    let start = message.find('`')? + 1;
    let end = message[start..].find('`')? + start;
    Some(message[start..end].to_string())
}

/// Characters no typed text may hold: controls (newline and tab aside where allowed), and the
/// bidirectional embeddings, overrides and isolates that make text read other than it is stored.
fn refused_char(c: char, multiline: bool) -> bool {
    (c.is_control() && !(multiline && (c == '\n' || c == '\t')))
        || ('\u{202a}'..='\u{202e}').contains(&c)
        || ('\u{2066}'..='\u{2069}').contains(&c)
}

/// A text field a person typed (a note, a reason, a specimen name): trimmed, `min` to `max` characters,
/// refused whole (naming the field and the character) if it holds a control character — newlines and
/// tabs are allowed where `multiline` — or a bidirectional override.
pub(crate) fn typed_text(field: &str, text: &str, min: usize, max: usize, multiline: bool) -> Result<String, ApiError> {
    let text = text.trim();
    if let Some(c) = text.chars().find(|&c| refused_char(c, multiline)) {
        let allowed = if multiline {
            "printable text, newlines and tabs (no other control characters or direction overrides)"
        } else {
            "printable text on one line (no control characters or direction overrides)"
        };
        return Err(ApiError::invalid(field, format!("holds the character U+{:04X}", c as u32), allowed));
    }
    let chars = text.chars().count();
    if chars < min || chars > max {
        return Err(ApiError::invalid(field, format!("{chars} characters"), format!("{min} to {max} characters")));
    }
    Ok(text.to_string())
}

/// Parses `bytes` as JSON into `T`, mapping serde's errors to the API's. The body must be a JSON object
/// (serde would also take an array for a struct).
pub(crate) fn parse_json<T: DeserializeOwned>(bytes: &[u8]) -> Result<T, ApiError> {
    let first = bytes.iter().find(|b| !b.is_ascii_whitespace());
    if first.is_some_and(|b| *b != b'{') {
        return Err(ApiError::BadRequest {
            error: "the body is not a JSON object".into(),
            field: None,
            allowed: Some("a JSON object, e.g. {}".into()),
        });
    }
    serde_json::from_slice(bytes).map_err(|error| {
        let message = error.to_string();
        // Drop serde's " at line 1 column 5": the field names the place.
        let message = message.split(" at line ").next().unwrap_or(&message).to_string();
        match error.classify() {
            serde_json::error::Category::Data => {
                if let Some(rest) = message.strip_prefix("unknown field ") {
                    let field = between_backticks(rest).unwrap_or_default();
                    let allowed = rest.split_once("expected ").map_or("no other fields", |(_, a)| a).to_string();
                    ApiError::invalid(&field, format!("unknown field `{field}`"), allowed)
                } else if let Some(rest) = message.strip_prefix("missing field ") {
                    let field = between_backticks(rest).unwrap_or_default();
                    ApiError::invalid(&field, format!("missing field `{field}`"), "a value is required")
                } else {
                    let text = String::from_utf8_lossy(bytes);
                    let offset = line_column_offset(&text, error.line(), error.column());
                    let field = key_before(&text, offset).unwrap_or_default();
                    let allowed = message.split_once("expected ").map_or("see the API documentation", |(_, a)| a);
                    ApiError::invalid(&field, message.clone(), allowed)
                }
            }
            _ => ApiError::BadRequest {
                error: format!("the body is not valid JSON: {message}"),
                field: None,
                allowed: Some("a JSON object".into()),
            },
        }
    })
}

fn line_column_offset(text: &str, line: usize, column: usize) -> usize {
    let start: usize = text.split_inclusive('\n').take(line.saturating_sub(1)).map(str::len).sum();
    start + column
}

fn check_json_type(request: &Request) -> Result<(), ApiError> {
    let content_type = request.headers().get(header::CONTENT_TYPE).and_then(|v| v.to_str().ok()).unwrap_or("");
    let mime = content_type.split(';').next().unwrap_or("").trim();
    if mime.eq_ignore_ascii_case("application/json") {
        Ok(())
    } else {
        Err(ApiError::UnsupportedMediaType(format!(
            "the body must be JSON with `Content-Type: application/json` (got {})",
            if content_type.is_empty() { "no content type".to_string() } else { format!("`{content_type}`") }
        )))
    }
}

async fn read_bytes(request: Request) -> Result<Bytes, ApiError> {
    axum::body::to_bytes(request.into_body(), MAX_BODY_BYTES).await.map_err(|_| ApiError::BadRequest {
        error: "the body could not be read or is too large".into(),
        field: None,
        allowed: Some(format!("a JSON object of at most {MAX_BODY_BYTES} bytes")),
    })
}

impl<S: Send + Sync, T: DeserializeOwned> FromRequest<S> for JsonBody<T> {
    type Rejection = ApiError;

    async fn from_request(request: Request, _: &S) -> Result<Self, Self::Rejection> {
        check_json_type(&request)?;
        let bytes = read_bytes(request).await?;
        parse_json(&bytes).map(JsonBody)
    }
}

impl<S: Send + Sync, T: DeserializeOwned> FromRequest<S> for OptionalJsonBody<T> {
    type Rejection = ApiError;

    async fn from_request(request: Request, _: &S) -> Result<Self, Self::Rejection> {
        let has_type = request.headers().contains_key(header::CONTENT_TYPE);
        if has_type {
            check_json_type(&request)?;
        }
        let bytes = read_bytes(request).await?;
        if bytes.iter().all(u8::is_ascii_whitespace) {
            return Ok(OptionalJsonBody(None));
        }
        if !has_type {
            return Err(ApiError::UnsupportedMediaType(
                "a body must be JSON with `Content-Type: application/json`".into(),
            ));
        }
        parse_json(&bytes).map(|v| OptionalJsonBody(Some(v)))
    }
}

#[cfg(test)]
mod unit {
    use super::*;

    #[derive(Debug, serde::Deserialize)]
    #[serde(deny_unknown_fields)]
    #[allow(dead_code)]
    struct Probe {
        height_mm: f64,
        name: Option<String>,
    }

    fn field_of(body: &str) -> (String, String) {
        match parse_json::<Probe>(body.as_bytes()) {
            Err(ApiError::Invalid { field, allowed, .. }) => (field, allowed),
            other => panic!("{body}: {other:?}"),
        }
    }

    #[test]
    fn serde_errors_name_the_field() {
        assert_eq!(field_of(r#"{"height_mm": 20, "colour": 1}"#).0, "colour");
        assert!(field_of(r#"{"height_mm": 20, "colour": 1}"#).1.contains("height_mm"));
        assert_eq!(field_of(r#"{"name": "x"}"#).0, "height_mm");
        assert_eq!(field_of(r#"{"name": "x", "height_mm": "tall"}"#).0, "height_mm");
        assert_eq!(field_of("{\n \"height_mm\": 1,\n \"name\": 5\n}").0, "name");
        assert!(matches!(parse_json::<Probe>(b"{oops"), Err(ApiError::BadRequest { .. })));
    }
}

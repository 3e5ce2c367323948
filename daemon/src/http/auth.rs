//! Access: with `[[http.user]]` configured, every request names a user by HTTP Basic (name + token, what
//! browsers send) or `Authorization: Bearer TOKEN` (scripts); viewers may only read (GET/HEAD), operators
//! may act. Tokens are compared in constant time and never logged. Without users everything is open, which
//! the start-up refuses on anything but a loopback address.

use axum::extract::{Request, State};
use axum::http::{Method, header};
use axum::middleware::Next;
use axum::response::{IntoResponse, Response};

use super::{ApiError, AppState};
use crate::config::{Role, User};

/// Who made the request (an extension on the request; absent when no users are configured).
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Caller {
    /// The user's name, as written in the journal.
    pub name: String,
    /// What the user may do.
    pub role: Role,
}

/// Equality of two byte strings whose running time depends only on their lengths: every byte pair is
/// XOR-folded, with no early exit on the first difference, so timing does not reveal a common prefix.
pub fn constant_time_eq(a: &[u8], b: &[u8]) -> bool {
    let longest = a.len().max(b.len());
    let mut diff = (a.len() ^ b.len()) as u64;
    for i in 0..longest {
        let x = a.get(i).copied().unwrap_or(0);
        let y = b.get(i).copied().unwrap_or(0);
        diff |= u64::from(x ^ y);
    }
    diff == 0
}

/// Standard base64 (RFC 4648 §4) with padding, as HTTP Basic uses (RFC 7617); `None` when malformed.
fn base64_decode(text: &str) -> Option<Vec<u8>> {
    fn value(c: u8) -> Option<u32> {
        match c {
            b'A'..=b'Z' => Some(u32::from(c - b'A')),
            b'a'..=b'z' => Some(u32::from(c - b'a') + 26),
            b'0'..=b'9' => Some(u32::from(c - b'0') + 52),
            b'+' => Some(62),
            b'/' => Some(63),
            _ => None,
        }
    }
    let bytes = text.trim().as_bytes();
    if bytes.is_empty() || !bytes.len().is_multiple_of(4) {
        return None;
    }
    let mut out = Vec::with_capacity(bytes.len() / 4 * 3);
    for (n, chunk) in bytes.chunks(4).enumerate() {
        let last = n == bytes.len() / 4 - 1;
        let pad = chunk.iter().rev().take_while(|&&c| c == b'=').count();
        if pad > 2 || (pad > 0 && !last) {
            return None;
        }
        let mut word = 0u32;
        for &c in &chunk[..4 - pad] {
            word = (word << 6) | value(c)?;
        }
        word <<= 6 * pad as u32;
        let decoded = [(word >> 16) as u8, (word >> 8) as u8, word as u8];
        out.extend_from_slice(&decoded[..3 - pad]);
    }
    Some(out)
}

/// The user the `Authorization` header names, checking every user's token (no early exit).
pub(crate) fn authenticate(users: &[User], authorization: Option<&str>) -> Option<Caller> {
    let value = authorization?.trim();
    let (scheme, rest) = value.split_once(' ')?;
    let (name, token): (Option<String>, Vec<u8>) = if scheme.eq_ignore_ascii_case("bearer") {
        (None, rest.trim().as_bytes().to_vec())
    } else if scheme.eq_ignore_ascii_case("basic") {
        let decoded = base64_decode(rest)?;
        let text = String::from_utf8(decoded).ok()?;
        let (name, token) = text.split_once(':')?;
        (Some(name.to_string()), token.as_bytes().to_vec())
    } else {
        return None;
    };
    let mut found = None;
    for user in users {
        let token_ok = constant_time_eq(user.token.as_bytes(), &token);
        let name_ok = name.as_deref().is_none_or(|n| n == user.name);
        if token_ok && name_ok && found.is_none() {
            found = Some(Caller { name: user.name.clone(), role: user.role });
        }
    }
    found
}

/// Whether a request only reads.
fn reads_only(method: &Method) -> bool {
    matches!(*method, Method::GET | Method::HEAD | Method::OPTIONS)
}

/// The access check on every route.
pub(crate) async fn require_user(State(state): State<AppState>, mut request: Request, next: Next) -> Response {
    if state.users.is_empty() {
        return next.run(request).await;
    }
    let authorization = request.headers().get(header::AUTHORIZATION).and_then(|v| v.to_str().ok());
    let Some(caller) = authenticate(&state.users, authorization) else {
        return ApiError::Unauthorized.into_response();
    };
    if caller.role == Role::Viewer && !reads_only(request.method()) {
        return ApiError::Forbidden(caller.name).into_response();
    }
    request.extensions_mut().insert(caller);
    next.run(request).await
}

/// The journal's actor for a request: the user's name, `None` without users.
pub(crate) fn actor(caller: Option<&axum::Extension<Caller>>) -> Option<String> {
    caller.map(|c| c.name.clone())
}

#[cfg(test)]
mod unit {
    use super::*;

    #[test]
    fn base64_decodes_the_rfc_4648_test_vectors() {
        // RFC 4648 §10 test vectors.
        for (plain, encoded) in [
            ("f", "Zg=="),
            ("fo", "Zm8="),
            ("foo", "Zm9v"),
            ("foob", "Zm9vYg=="),
            ("fooba", "Zm9vYmE="),
            ("foobar", "Zm9vYmFy"),
        ] {
            assert_eq!(base64_decode(encoded).as_deref(), Some(plain.as_bytes()), "{encoded}");
        }
        assert_eq!(base64_decode("Zm9v!A=="), None);
        assert_eq!(base64_decode("Zg=a"), None);
        assert_eq!(base64_decode("Zg"), None);
    }

    #[test]
    fn constant_time_eq_tells_equal_from_different_and_different_lengths() {
        assert!(constant_time_eq(b"abcdefgh12345678", b"abcdefgh12345678"));
        assert!(!constant_time_eq(b"abcdefgh12345678", b"abcdefgh12345679"));
        assert!(!constant_time_eq(b"abcdefgh12345678", b"abcdefgh1234567"));
        assert!(!constant_time_eq(b"", b"\0"), "a zero byte is not the end of the string");
        assert!(constant_time_eq(b"", b""));
    }

    #[test]
    fn basic_needs_the_matching_name_and_bearer_the_token_alone() {
        let users = vec![
            User { name: "ana".into(), role: Role::Operator, token: "op-token-0123456789".into() },
            User { name: "vic".into(), role: Role::Viewer, token: "view-token-0123456789".into() },
        ];
        // "ana:op-token-0123456789" in base64.
        let basic = "Basic YW5hOm9wLXRva2VuLTAxMjM0NTY3ODk=";
        assert_eq!(authenticate(&users, Some(basic)).map(|c| c.name), Some("ana".into()));
        // "vic:op-token-0123456789": ana's token under vic's name.
        assert_eq!(authenticate(&users, Some("Basic dmljOm9wLXRva2VuLTAxMjM0NTY3ODk=")), None);
        assert_eq!(authenticate(&users, Some("Bearer view-token-0123456789")).map(|c| c.role), Some(Role::Viewer));
        assert_eq!(authenticate(&users, Some("Bearer view-token-012345678")), None);
        assert_eq!(authenticate(&users, Some("Digest x")), None);
        assert_eq!(authenticate(&users, None), None);
    }
}

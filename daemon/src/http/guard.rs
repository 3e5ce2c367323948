//! Requests from elsewhere: every request's `Host` must name the daemon (its listen address, loopback
//! aliases on a loopback listen, or a configured public origin's host), so a rebound DNS name cannot reach
//! it; every request that acts (not GET/HEAD/OPTIONS) must say `Content-Type: application/json` (which a
//! cross-site HTML form cannot send) and must not come from another site by `Sec-Fetch-Site` or `Origin`.
//! Every response carries the security headers (CSP, no framing, no sniffing, same-origin referrers).

use std::net::{IpAddr, SocketAddr};
use std::sync::OnceLock;

use axum::extract::{Request, State};
use axum::http::{HeaderMap, HeaderName, HeaderValue, Method, header};
use axum::middleware::Next;
use axum::response::{IntoResponse, Response};

use super::{ApiError, AppState};
use crate::config::{PublicOrigin, split_host_port};

/// The pages load only their own scripts and styles; the server-built pages (overview, report) and a few
/// legend swatches carry inline styles, scripts never are inline.
pub(crate) const CONTENT_SECURITY_POLICY: &str = "default-src 'self'; script-src 'self'; \
     style-src 'self' 'unsafe-inline'; img-src 'self' data:; connect-src 'self'; object-src 'none'; \
     base-uri 'none'; form-action 'self'; frame-ancestors 'none'";

/// Where the daemon may be addressed from.
#[derive(Debug)]
pub struct Guard {
    /// The configured listen address (its port may be 0 until the socket is bound).
    configured: SocketAddr,
    /// The bound address, once known.
    bound: OnceLock<SocketAddr>,
    /// `[http] public_origins`.
    public: Vec<PublicOrigin>,
}

impl Guard {
    /// A guard for `listen` and the configured public origins.
    pub fn new(listen: SocketAddr, public: Vec<PublicOrigin>) -> Guard {
        Guard { configured: listen, bound: OnceLock::new(), public }
    }

    /// Records the address the server actually listens on (a configured port 0 becomes the real one).
    pub fn bound(&self, addr: SocketAddr) {
        let _ = self.bound.set(addr);
    }

    fn listen(&self) -> SocketAddr {
        self.bound.get().copied().unwrap_or(self.configured)
    }

    /// What a `Host` may say, for error messages.
    fn allowed_hosts(&self) -> String {
        let listen = self.listen();
        let port = listen.port();
        let mut hosts: Vec<String> = if listen.ip().is_unspecified() {
            vec![format!("any of this machine's IP addresses with port {port}")]
        } else {
            vec![authority(listen.ip(), port)]
        };
        if listen.ip().is_loopback() || listen.ip().is_unspecified() {
            hosts.extend([format!("localhost:{port}"), format!("127.0.0.1:{port}"), format!("[::1]:{port}")]);
        }
        hosts.extend(self.public.iter().map(|o| format!("{}:{}", o.host, o.port)));
        hosts.dedup();
        hosts.join(", ")
    }

    /// Whether `host` (a `Host` header's value) names this daemon.
    fn host_ok(&self, host: &str) -> bool {
        let lower = host.trim().to_ascii_lowercase();
        let Some((name, port)) = split_host_port(&lower) else { return false };
        let explicit = match port {
            None => None,
            Some(p) => match p.parse::<u16>() {
                Ok(p) => Some(p),
                Err(_) => return false,
            },
        };
        let listen = self.listen();
        let ip = name.trim_start_matches('[').trim_end_matches(']').parse::<IpAddr>().ok();
        let local = listen.ip().is_loopback() || listen.ip().is_unspecified();
        let listen_names = explicit.unwrap_or(80) == listen.port()
            && match ip {
                Some(ip) => {
                    ip == listen.ip()
                        || (listen.ip().is_unspecified() && ip.is_ipv4() == listen.ip().is_ipv4())
                        || (local && ip.is_loopback())
                }
                None => local && name == "localhost",
            };
        // Behind a proxy `Host` carries the public port, or none for the scheme's default.
        listen_names
            || self.public.iter().any(|o| {
                let default = if o.scheme == "https" { 443 } else { 80 };
                o.host == name && explicit.unwrap_or(default) == o.port
            })
    }

    /// Whether an `Origin` is the daemon's own (as `host` addresses it) or a configured public origin.
    fn origin_ok(&self, origin: &str, host: Option<&str>) -> bool {
        let Ok(origin) = PublicOrigin::parse(origin) else { return false };
        if self.public.contains(&origin) {
            return true;
        }
        // The daemon speaks plain HTTP: its own origin is http:// and the host the request named.
        host.and_then(|h| PublicOrigin::parse(&format!("http://{h}")).ok()).is_some_and(|own| own == origin)
    }
}

fn authority(ip: IpAddr, port: u16) -> String {
    match ip {
        IpAddr::V4(v4) => format!("{v4}:{port}"),
        IpAddr::V6(v6) => format!("[{v6}]:{port}"),
    }
}

/// The host the request was addressed to: `Host`, else the URI's authority (HTTP/2); `None` for neither
/// (an HTTP/1.0 client: no browser, so nothing to rebind).
fn request_host(request: &Request) -> Option<String> {
    request
        .headers()
        .get(header::HOST)
        .map(|v| v.to_str().unwrap_or("\u{fffd}").to_string())
        .or_else(|| request.uri().authority().map(|a| a.as_str().to_string()))
}

fn header_text<'a>(headers: &'a HeaderMap, name: &HeaderName) -> Option<&'a str> {
    headers.get(name).map(|v| v.to_str().unwrap_or("\u{fffd}"))
}

/// Whether a method only reads (as the access check counts them).
fn acts(method: &Method) -> bool {
    !matches!(*method, Method::GET | Method::HEAD | Method::OPTIONS)
}

/// The checks, in order: `Host` (421), then for actions `Sec-Fetch-Site` and `Origin` (403) and
/// `Content-Type` (415).
pub(crate) fn check(guard: &Guard, request: &Request) -> Result<(), ApiError> {
    let host = request_host(request);
    if let Some(h) = &host
        && !guard.host_ok(h)
    {
        return Err(ApiError::MisdirectedHost(format!(
            "`Host: {h}` does not name this daemon (allowed: {}; add the name to [http] public_origins for a proxy)",
            guard.allowed_hosts()
        )));
    }
    if !acts(request.method()) {
        return Ok(());
    }
    let headers = request.headers();
    let fetch_site = HeaderName::from_static("sec-fetch-site");
    if let Some(site) = header_text(headers, &fetch_site)
        && !matches!(site.trim().to_ascii_lowercase().as_str(), "same-origin" | "none")
    {
        return Err(ApiError::CrossSite {
            header: "Sec-Fetch-Site",
            error: format!("`Sec-Fetch-Site: {site}`: actions are taken only from the daemon's own pages"),
            allowed: "same-origin or none (or no such header, for scripts)".into(),
        });
    }
    if let Some(origin) = header_text(headers, &header::ORIGIN)
        && !guard.origin_ok(origin, host.as_deref())
    {
        let mut allowed = host.as_deref().map(|h| format!("http://{h}")).unwrap_or_default();
        for o in &guard.public {
            allowed += &format!("{}{o}", if allowed.is_empty() { "" } else { ", " });
        }
        return Err(ApiError::CrossSite {
            header: "Origin",
            error: format!("`Origin: {origin}` is another site: actions are taken only from the daemon's own pages"),
            allowed: format!("the daemon's own origin ({allowed}) or no Origin header (scripts)"),
        });
    }
    let content_type = header_text(headers, &header::CONTENT_TYPE).unwrap_or("");
    let mime = content_type.split(';').next().unwrap_or("").trim();
    if !mime.eq_ignore_ascii_case("application/json") {
        return Err(ApiError::BadContentType(if content_type.is_empty() {
            "no Content-Type".into()
        } else {
            format!("`Content-Type: {content_type}`")
        }));
    }
    Ok(())
}

/// The request guard on every route (outside the access check).
pub(crate) async fn refuse_foreign(State(state): State<AppState>, request: Request, next: Next) -> Response {
    match check(&state.guard, &request) {
        Ok(()) => next.run(request).await,
        Err(error) => error.into_response(),
    }
}

/// Adds the security headers to every response, errors included.
pub(crate) async fn security_headers(request: Request, next: Next) -> Response {
    let mut response = next.run(request).await;
    let headers = response.headers_mut();
    headers.insert(header::CONTENT_SECURITY_POLICY, HeaderValue::from_static(CONTENT_SECURITY_POLICY));
    headers.insert(header::X_FRAME_OPTIONS, HeaderValue::from_static("DENY"));
    headers.insert(header::X_CONTENT_TYPE_OPTIONS, HeaderValue::from_static("nosniff"));
    headers.insert(header::REFERRER_POLICY, HeaderValue::from_static("same-origin"));
    response
}

#[cfg(test)]
mod unit {
    use super::*;

    fn guard(listen: &str, public: &[&str]) -> Guard {
        Guard::new(listen.parse().unwrap(), public.iter().map(|o| PublicOrigin::parse(o).unwrap()).collect())
    }

    #[test]
    fn hosts_name_the_listen_address_its_loopback_aliases_or_a_public_origin() {
        let g = guard("127.0.0.1:8321", &["https://lab.example.org"]);
        for ok in [
            "127.0.0.1:8321",
            "localhost:8321",
            "LOCALHOST:8321",
            "[::1]:8321",
            "lab.example.org",
            "lab.example.org:443",
        ] {
            assert!(g.host_ok(ok), "{ok}");
        }
        for bad in
            ["evil.example:8321", "127.0.0.1:8322", "localhost", "lab.example.org:8443", "", "127.0.0.1:x", "a b:8321"]
        {
            assert!(!g.host_ok(bad), "{bad}");
        }
        let g = guard("192.168.1.20:8321", &[]);
        assert!(g.host_ok("192.168.1.20:8321"));
        assert!(!g.host_ok("localhost:8321"), "a LAN listen is not reachable as localhost");
        assert!(!g.host_ok("labpc.local:8321"), "names need public_origins");
        g.bound("192.168.1.20:9000".parse().unwrap());
        assert!(g.host_ok("192.168.1.20:9000") && !g.host_ok("192.168.1.20:8321"));
    }

    #[test]
    fn origins_are_the_own_one_or_configured() {
        let g = guard("127.0.0.1:8321", &["https://lab.example.org"]);
        assert!(g.origin_ok("http://127.0.0.1:8321", Some("127.0.0.1:8321")));
        assert!(g.origin_ok("http://localhost:8321", Some("localhost:8321")));
        assert!(g.origin_ok("https://lab.example.org", Some("lab.example.org")));
        assert!(!g.origin_ok("http://localhost:8321", Some("127.0.0.1:8321")), "another origin than the Host");
        assert!(!g.origin_ok("http://127.0.0.1:9999", Some("127.0.0.1:8321")));
        assert!(!g.origin_ok("null", Some("127.0.0.1:8321")));
        assert!(!g.origin_ok("https://127.0.0.1:8321", Some("127.0.0.1:8321")), "the daemon has no TLS");
    }
}

//! Notifications end to end: the real `oedolog demo --config FILE` posts to a `[[notify.webhook]]` that
//! points at a loopback receiver in this test (a plain HTTP/1.1 listener on std, port 0).

use std::io::{BufRead, BufReader, Read, Write};
use std::net::{TcpListener, TcpStream};
use std::sync::mpsc::{self, Receiver, RecvTimeoutError};
use std::time::Duration;

use oedolog_tests::{ChildGuard, temp_dir, workspace_binary};

use super::*;

/// One POST: its request line, its headers (names lower-cased) and its JSON body.
struct Post {
    request_line: String,
    headers: Vec<(String, String)>,
    body: serde_json::Value,
}

impl Post {
    fn header(&self, name: &str) -> Option<&str> {
        self.headers.iter().find(|(n, _)| n == name).map(|(_, v)| v.as_str())
    }
}

/// Reads one HTTP/1.1 request (head, then `Content-Length` bytes) and answers 204.
fn read_post(stream: TcpStream) -> Result<Post> {
    stream.set_read_timeout(Some(Duration::from_secs(10)))?;
    let mut reader = BufReader::new(stream.try_clone()?);
    let mut request_line = String::new();
    reader.read_line(&mut request_line)?;
    let mut headers = Vec::new();
    loop {
        let mut line = String::new();
        reader.read_line(&mut line)?;
        let line = line.trim_end();
        if line.is_empty() {
            break;
        }
        let (name, value) = line.split_once(':').context("a header line")?;
        headers.push((name.trim().to_ascii_lowercase(), value.trim().to_string()));
    }
    let length: usize = headers.iter().find(|(n, _)| n == "content-length").context("Content-Length")?.1.parse()?;
    let mut body = vec![0; length];
    reader.read_exact(&mut body)?;
    let mut stream = stream;
    stream.write_all(b"HTTP/1.1 204 No Content\r\nConnection: close\r\n\r\n")?;
    Ok(Post { request_line: request_line.trim_end().to_string(), headers, body: serde_json::from_slice(&body)? })
}

/// A receiver on 127.0.0.1:0; every POST read comes out of the channel.
fn receiver() -> (std::net::SocketAddr, Receiver<Post>) {
    let listener = TcpListener::bind("127.0.0.1:0").expect("bind the receiver");
    let addr = listener.local_addr().expect("its address");
    let (tx, rx) = mpsc::channel();
    std::thread::spawn(move || {
        for stream in listener.incoming().flatten() {
            if let Ok(post) = read_post(stream)
                && tx.send(post).is_err()
            {
                return;
            }
        }
    });
    (addr, rx)
}

#[test]
fn the_demo_posts_a_subscribed_journal_event_to_a_loopback_webhook() {
    let dir = temp_dir();
    let (addr, posts) = receiver();
    let config = write_config(
        dir.path(),
        &format!(
            "[http]\nlisten = \"127.0.0.1:0\"\n\n[[notify.webhook]]\nurl = \"http://{addr}/lab-hook?token=e2e\"\nevents = [\"test\", \"armed\"]\ntimeout_s = 5\n"
        ),
    );
    let db = dir.path().join("demo.sqlite");
    let mut command = Command::new(workspace_binary("oedolog"));
    command.arg("demo").args(["--frames", "1", "--speed", "3000", "--listen", "127.0.0.1:0", "--db"]).arg(&db);
    command.arg("--config").arg(&config);
    let (demo, _line) = ChildGuard::spawn_ready("oedolog demo", command, "dashboard at http://").unwrap();

    // The demo starts a test on each frame as soon as it is up: that entry is the first subscribed one.
    let post = match posts.recv_timeout(Duration::from_secs(30)) {
        Ok(post) => post,
        Err(RecvTimeoutError::Timeout) => panic!("no POST within 30 s; demo output:\n{}", demo.output_log()),
        Err(RecvTimeoutError::Disconnected) => panic!("the receiver stopped"),
    };
    assert_eq!(post.body["kind"], "test-started", "the first post is the test start: {}", post.body);
    assert_eq!(post.request_line, "POST /lab-hook?token=e2e HTTP/1.1");
    assert_eq!(post.header("content-type"), Some("application/json"));
    let body = &post.body;
    assert_eq!(body["event"], "test");
    assert_eq!(body["frame"], "F1");
    assert_eq!(body["frame_name"], "Frame 1");
    assert_eq!(body["simulated_time"], true, "the demo's clock runs fast");
    assert!(body["details"].is_object());
    let at = body["at"].as_str().unwrap();
    assert!(at.len() == "2026-01-01T00:00:00.000000Z".len() && at.ends_with('Z') && &at[10..11] == "T", "{at}");
    let id = body["event_id"].as_i64().unwrap();
    assert_eq!(post.header("x-oedolog-event"), Some(id.to_string().as_str()));
    // The id is the journal's: the same entry, as the daemon stored it.
    let stored: (String, String) =
        rusqlite::Connection::open_with_flags(&db, rusqlite::OpenFlags::SQLITE_OPEN_READ_ONLY)
            .unwrap()
            .query_row("SELECT kind, message FROM events WHERE id = ?1", [id], |r| Ok((r.get(0)?, r.get(1)?)))
            .unwrap();
    assert_eq!(stored, ("test-started".to_string(), body["message"].as_str().unwrap().to_string()));
}

//! A small OpenAI-compatible chat server on loopback, written for the
//! remote-drafter tests. It implements exactly this much of the protocol:
//!
//! - `POST <any path>` with a JSON body; the request line, headers and body
//!   are recorded (the tests read `model`, `messages`, `stream` and the
//!   `Authorization` header).
//! - a non-streaming reply: `200`, `application/json`,
//!   `{"id", "object": "chat.completion", "model", "choices": [{"index": 0,
//!   "message": {"role": "assistant", "content"}, "finish_reason": "stop"}],
//!   "usage": {"prompt_tokens", "completion_tokens", "total_tokens"}}`;
//! - a streaming reply: `200`, `text/event-stream`, one
//!   `data: {"choices": [{"index": 0, "delta": {"content"}, "finish_reason"}]}`
//!   event per piece, then `data: [DONE]`;
//! - scripted failures: any status with a body and optional `Retry-After`,
//!   a delay before replying, or raw bytes (for malformed replies).
//!
//! Each connection serves one request (`Connection: close`); replies are
//! taken from the script in order.

use std::io::{BufRead, BufReader, Read, Write};
use std::net::{TcpListener, TcpStream};
use std::sync::{Arc, Mutex};
use std::time::Duration;

#[derive(Clone)]
pub enum Reply {
    Json(String),
    Stream(Vec<String>),
    Status {
        code: u16,
        body: String,
        retry_after: Option<u32>,
    },
    Delay(Duration, Box<Reply>),
    /// Raw body with a content type, sent as given.
    Raw(&'static str, String),
}

#[derive(Debug, Clone)]
pub struct Recorded {
    pub path: String,
    pub headers: Vec<(String, String)>,
    pub body: serde_json::Value,
}

pub struct Endpoint {
    pub base_url: String,
    pub requests: Arc<Mutex<Vec<Recorded>>>,
}

fn read_request(stream: &mut TcpStream) -> Option<Recorded> {
    let mut r = BufReader::new(stream.try_clone().ok()?);
    let mut line = String::new();
    r.read_line(&mut line).ok()?;
    let path = line.split_whitespace().nth(1)?.to_string();
    let mut headers = Vec::new();
    let mut len = 0usize;
    loop {
        let mut h = String::new();
        r.read_line(&mut h).ok()?;
        let h = h.trim_end();
        if h.is_empty() {
            break;
        }
        if let Some((k, v)) = h.split_once(':') {
            let (k, v) = (k.trim().to_lowercase(), v.trim().to_string());
            if k == "content-length" {
                len = v.parse().unwrap_or(0);
            }
            headers.push((k, v));
        }
    }
    let mut body = vec![0u8; len];
    r.read_exact(&mut body).ok()?;
    Some(Recorded {
        path,
        headers,
        body: serde_json::from_slice(&body).unwrap_or(serde_json::Value::Null),
    })
}

fn reason(code: u16) -> &'static str {
    match code {
        200 => "OK",
        400 => "Bad Request",
        401 => "Unauthorized",
        404 => "Not Found",
        429 => "Too Many Requests",
        500 => "Internal Server Error",
        503 => "Service Unavailable",
        _ => "Status",
    }
}

fn send(stream: &mut TcpStream, reply: &Reply, model: &str) -> std::io::Result<()> {
    match reply {
        Reply::Delay(d, inner) => {
            std::thread::sleep(*d);
            send(stream, inner, model)
        }
        Reply::Json(content) => {
            let body = serde_json::json!({
                "id": "chatcmpl-test",
                "object": "chat.completion",
                "model": model,
                "choices": [{"index": 0, "message": {"role": "assistant", "content": content}, "finish_reason": "stop"}],
                "usage": {"prompt_tokens": 11, "completion_tokens": 7, "total_tokens": 18}
            })
            .to_string();
            write!(
                stream,
                "HTTP/1.1 200 OK\r\nContent-Type: application/json\r\nContent-Length: {}\r\nConnection: close\r\n\r\n{body}",
                body.len()
            )
        }
        Reply::Stream(pieces) => {
            write!(
                stream,
                "HTTP/1.1 200 OK\r\nContent-Type: text/event-stream\r\nConnection: close\r\n\r\n"
            )?;
            for (i, p) in pieces.iter().enumerate() {
                let fin = if i + 1 == pieces.len() {
                    serde_json::json!("stop")
                } else {
                    serde_json::Value::Null
                };
                let ev = serde_json::json!({
                    "id": "chatcmpl-test", "object": "chat.completion.chunk", "model": model,
                    "choices": [{"index": 0, "delta": {"content": p}, "finish_reason": fin}]
                });
                write!(stream, "data: {ev}\n\n")?;
                stream.flush()?;
                std::thread::sleep(Duration::from_millis(5));
            }
            write!(stream, "data: [DONE]\n\n")
        }
        Reply::Status {
            code,
            body,
            retry_after,
        } => {
            let ra = retry_after
                .map(|s| format!("Retry-After: {s}\r\n"))
                .unwrap_or_default();
            write!(
                stream,
                "HTTP/1.1 {code} {}\r\nContent-Type: application/json\r\nContent-Length: {}\r\n{ra}Connection: close\r\n\r\n{body}",
                reason(*code),
                body.len()
            )
        }
        Reply::Raw(ctype, body) => write!(
            stream,
            "HTTP/1.1 200 OK\r\nContent-Type: {ctype}\r\nContent-Length: {}\r\nConnection: close\r\n\r\n{body}",
            body.len()
        ),
    }
}

/// Start the server with a script of replies; it stops when the test ends.
pub fn serve(script: Vec<Reply>) -> Endpoint {
    let listener = TcpListener::bind("127.0.0.1:0").unwrap();
    let addr = listener.local_addr().unwrap();
    let requests = Arc::new(Mutex::new(Vec::new()));
    let recorded = requests.clone();
    std::thread::spawn(move || {
        let mut script = script.into_iter();
        for stream in listener.incoming() {
            let Ok(mut stream) = stream else { continue };
            let Some(req) = read_request(&mut stream) else {
                continue;
            };
            let model = req.body["model"].as_str().unwrap_or("").to_string();
            recorded.lock().unwrap().push(req);
            let reply = script.next().unwrap_or(Reply::Status {
                code: 500,
                body: r#"{"error":{"message":"script exhausted"}}"#.into(),
                retry_after: None,
            });
            let _ = send(&mut stream, &reply, &model);
            let _ = stream.flush();
        }
    });
    Endpoint {
        base_url: format!("http://{addr}/v1"),
        requests,
    }
}

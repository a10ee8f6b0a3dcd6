//! Reading a JSON body with explicit limits: media type, size, and time to arrive. Small bodies
//! are read whole; large uploads are parsed as they arrive, on the blocking pool, straight into
//! their typed form, so the body is never held twice (as text and as a tree).

use super::problem::Problem;
use actix_web::{web, HttpRequest};
use futures_util::StreamExt;
use serde_json::Value;
use std::time::Duration;

/// The media type every JSON body is sent as.
pub const JSON: &[&str] = &["application/json"];

/// Refuses a Content-Type not in `accepted` (415) and a declared length over `limit` (413)
/// before reading. The declared length, if any, is returned to size the buffer once.
fn check_head(
    req: &HttpRequest,
    limit: usize,
    accepted: &[&str],
) -> Result<Option<usize>, Problem> {
    let content_type = req
        .headers()
        .get("content-type")
        .and_then(|v| v.to_str().ok())
        .unwrap_or("");
    let media = content_type.split(';').next().unwrap_or("").trim();
    if !accepted.iter().any(|a| media.eq_ignore_ascii_case(a)) {
        return Err(Problem::unsupported_media_type(content_type, accepted));
    }
    let declared = req
        .headers()
        .get("content-length")
        .and_then(|v| v.to_str().ok())
        .and_then(|v| v.parse::<usize>().ok());
    if declared.is_some_and(|n| n > limit) {
        return Err(Problem::too_large(limit));
    }
    Ok(declared)
}

fn payload_problem(e: actix_web::error::PayloadError, limit: usize) -> Problem {
    match e {
        actix_web::error::PayloadError::Overflow => Problem::too_large(limit),
        other => Problem::bad_body(&other.to_string()),
    }
}

/// The whole body as bytes, within `limit` bytes and `timeout`.
pub async fn read_bytes(
    req: &HttpRequest,
    mut payload: web::Payload,
    limit: usize,
    timeout: Duration,
) -> Result<web::Bytes, Problem> {
    let declared = check_head(req, limit, JSON)?;
    let read = async {
        // Sized once when the length is declared (never above the limit): no doubling copies.
        let mut body = web::BytesMut::with_capacity(declared.unwrap_or(0));
        while let Some(chunk) = payload.next().await {
            let chunk = chunk.map_err(|e| payload_problem(e, limit))?;
            if body.len() + chunk.len() > limit {
                return Err(Problem::too_large(limit));
            }
            body.extend_from_slice(&chunk);
        }
        Ok(body.freeze())
    };
    tokio::time::timeout(timeout, read)
        .await
        .map_err(|_| Problem::body_timeout(timeout.as_millis() as u64))?
}

/// Reads and parses a small body (a single decision, a final action) as a JSON tree. Refuses
/// malformed JSON (400, with line and column) besides the limits of [`read_bytes`].
pub async fn read_json(
    req: &HttpRequest,
    payload: web::Payload,
    limit: usize,
    timeout: Duration,
) -> Result<Value, Problem> {
    let body = read_bytes(req, payload, limit, timeout).await?;
    serde_json::from_slice(&body).map_err(|e| Problem::malformed_json(&e))
}

/// Parses a large body as it arrives: `parse` runs on the blocking pool, reading the chunks the
/// request worker forwards through a small channel, so at most a few chunks of the text are in
/// memory at once besides what `parse` builds. The limits of [`read_bytes`] apply; when `parse`
/// stops early (a fault in the first rows), the rest of the body is not read. The body's media
/// type must be one of `accepted`.
pub async fn parse_streamed<T, F>(
    req: &HttpRequest,
    mut payload: web::Payload,
    (limit, timeout): (usize, Duration),
    accepted: &[&str],
    parse: F,
) -> Result<T, Problem>
where
    T: Send + 'static,
    F: FnOnce(&mut dyn std::io::Read) -> Result<T, Problem> + Send + 'static,
{
    check_head(req, limit, accepted)?;
    // `None` marks the end of the body: a channel closed without it is a body cut short.
    let (tx, rx) = tokio::sync::mpsc::channel::<Option<web::Bytes>>(4);
    let parser = web::block(move || parse(&mut ChunkReader::new(rx)));
    let feed = async move {
        let mut seen = 0usize;
        while let Some(chunk) = payload.next().await {
            let chunk = chunk.map_err(|e| payload_problem(e, limit))?;
            seen += chunk.len();
            if seen > limit {
                return Err(Problem::too_large(limit));
            }
            if tx.send(Some(chunk)).await.is_err() {
                return Ok(()); // the parser has stopped: its own answer says why
            }
        }
        let _ = tx.send(None).await;
        Ok(())
    };
    let feed = async {
        tokio::time::timeout(timeout, feed)
            .await
            .map_err(|_| Problem::body_timeout(timeout.as_millis() as u64))?
    };
    // When the feed fails the sender is dropped: the parser sees a cut body and ends too.
    let (fed, parsed) = futures_util::future::join(feed, parser).await;
    fed?;
    parsed.map_err(|_| Problem::internal("the body parser stopped"))?
}

/// `io::Read` over the chunks a request worker forwards (blocking: for the blocking pool only).
/// A body cut short (too large, too slow, the client gone) is a read error, never an end: a
/// parser must not take a cut-off last row for a whole one.
struct ChunkReader {
    rx: tokio::sync::mpsc::Receiver<Option<web::Bytes>>,
    current: web::Bytes,
    ended: bool,
}

impl ChunkReader {
    fn new(rx: tokio::sync::mpsc::Receiver<Option<web::Bytes>>) -> Self {
        ChunkReader {
            rx,
            current: web::Bytes::new(),
            ended: false,
        }
    }
}

impl std::io::Read for ChunkReader {
    fn read(&mut self, out: &mut [u8]) -> std::io::Result<usize> {
        while self.current.is_empty() {
            if self.ended {
                return Ok(0);
            }
            match self.rx.blocking_recv() {
                Some(Some(chunk)) => self.current = chunk,
                Some(None) => self.ended = true,
                None => {
                    return Err(std::io::Error::new(
                        std::io::ErrorKind::UnexpectedEof,
                        "the body was cut short",
                    ))
                }
            }
        }
        let n = out.len().min(self.current.len());
        out[..n].copy_from_slice(&self.current.split_to(n));
        Ok(n)
    }
}

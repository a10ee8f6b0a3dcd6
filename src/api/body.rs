//! Reading a JSON body with explicit limits: media type, size, and time to arrive.

use super::problem::Problem;
use actix_web::{web, HttpRequest};
use futures_util::StreamExt;
use serde_json::Value;
use std::time::Duration;

/// Reads and parses the body. Refuses a wrong Content-Type (415), a body over `limit` bytes
/// (413, before reading it when Content-Length says so), one slower than `timeout` (408), and
/// malformed JSON (400, with line and column).
pub async fn read_json(
    req: &HttpRequest,
    mut payload: web::Payload,
    limit: usize,
    timeout: Duration,
) -> Result<Value, Problem> {
    let content_type = req
        .headers()
        .get("content-type")
        .and_then(|v| v.to_str().ok())
        .unwrap_or("");
    let media = content_type.split(';').next().unwrap_or("").trim();
    if !media.eq_ignore_ascii_case("application/json") {
        return Err(Problem::unsupported_media_type(content_type));
    }
    let declared = req
        .headers()
        .get("content-length")
        .and_then(|v| v.to_str().ok())
        .and_then(|v| v.parse::<usize>().ok());
    if declared.is_some_and(|n| n > limit) {
        return Err(Problem::too_large(limit));
    }
    let read = async {
        let mut body = web::BytesMut::new();
        while let Some(chunk) = payload.next().await {
            let chunk = chunk.map_err(|e| match e {
                actix_web::error::PayloadError::Overflow => Problem::too_large(limit),
                other => Problem::bad_body(&other.to_string()),
            })?;
            if body.len() + chunk.len() > limit {
                return Err(Problem::too_large(limit));
            }
            body.extend_from_slice(&chunk);
        }
        Ok(body)
    };
    let body = tokio::time::timeout(timeout, read)
        .await
        .map_err(|_| Problem::body_timeout(timeout.as_millis() as u64))??;
    serde_json::from_slice(&body).map_err(|e| Problem::malformed_json(&e))
}

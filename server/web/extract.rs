//! Request extractors whose rejections are this API's JSON errors, never a framework's plain
//! text.

use std::net::SocketAddr;

use axum::body::Bytes;
use axum::extract::rejection::BytesRejection;
use axum::extract::{ConnectInfo, FromRequest, FromRequestParts, Request};
use axum::http::request::Parts;
use axum::http::{StatusCode, header};
use serde::de::DeserializeOwned;

use super::AppState;
use super::error::ApiError;
use crate::domain::metric::Problems;
use crate::domain::text;

/// A JSON body: `application/json` (415 otherwise), within the body limit (413), and a
/// well-formed value of `T` (400 naming the field and what was wrong).
pub struct ApiJson<T>(pub T);

fn is_json(content_type: &str) -> bool {
    let mime = content_type
        .split(';')
        .next()
        .unwrap_or("")
        .trim()
        .to_ascii_lowercase();
    mime == "application/json" || (mime.starts_with("application/") && mime.ends_with("+json"))
}

/// Parses JSON into `T`, naming the path of the offending field in the error.
pub fn parse_json<T: DeserializeOwned>(bytes: &[u8]) -> Result<T, ApiError> {
    if bytes.iter().all(u8::is_ascii_whitespace) {
        return Err(ApiError::new(
            StatusCode::BAD_REQUEST,
            "bad_json",
            "the request body is empty; send a JSON object",
        ));
    }
    let mut de = serde_json::Deserializer::from_slice(bytes);
    let value: T = serde_path_to_error::deserialize(&mut de).map_err(|e| {
        let path = e.path().to_string();
        let inner = e.into_inner();
        let syntax = matches!(
            inner.classify(),
            serde_json::error::Category::Syntax | serde_json::error::Category::Eof
        );
        if syntax || path == "." || path.is_empty() {
            return ApiError::new(
                StatusCode::BAD_REQUEST,
                "bad_json",
                format!("malformed JSON: {inner}"),
            );
        }
        ApiError {
            fields: Some(Problems::single(&path, inner.to_string())),
            ..ApiError::new(
                StatusCode::BAD_REQUEST,
                "bad_json",
                format!("{path}: {inner}"),
            )
        }
    })?;
    // Anything after the value is malformed too.
    de.end().map_err(|e| {
        ApiError::new(
            StatusCode::BAD_REQUEST,
            "bad_json",
            format!("malformed JSON: {e}"),
        )
    })?;
    Ok(value)
}

/// Turns a body-reading failure into 413 (too large) or 400.
pub fn body_error(rejection: BytesRejection) -> ApiError {
    if rejection.status() == StatusCode::PAYLOAD_TOO_LARGE {
        ApiError::new(
            StatusCode::PAYLOAD_TOO_LARGE,
            "too_large",
            "the request body is larger than this endpoint accepts",
        )
    } else {
        ApiError::bad_request(format!("the request body could not be read: {rejection}"))
    }
}

/// How much of an over-long body is read and dropped before answering 413, so the client
/// has finished sending and reads the answer instead of a reset connection.
const DRAIN_FACTOR: usize = 8;

/// Reads a body of at most `limit` bytes. A longer one answers 413 once up to
/// `DRAIN_FACTOR` times the limit has been read and dropped.
pub async fn read_body(body: axum::body::Body, limit: usize) -> Result<Bytes, ApiError> {
    use http_body_util::BodyExt;
    let too_large = || {
        ApiError::new(
            StatusCode::PAYLOAD_TOO_LARGE,
            "too_large",
            format!("the request body is larger than this endpoint accepts ({limit} bytes)"),
        )
    };
    let mut body = body;
    let mut kept: Vec<u8> = Vec::new();
    let mut seen = 0usize;
    while let Some(frame) = body.frame().await {
        let frame = frame.map_err(|e| {
            ApiError::bad_request(format!("the request body could not be read: {e}"))
        })?;
        if let Ok(data) = frame.into_data() {
            seen += data.len();
            if seen > limit.saturating_mul(DRAIN_FACTOR) {
                return Err(too_large());
            }
            if seen <= limit {
                kept.extend_from_slice(&data);
            }
        }
    }
    if seen > limit {
        return Err(too_large());
    }
    Ok(Bytes::from(kept))
}

impl<T: DeserializeOwned> FromRequest<AppState> for ApiJson<T> {
    type Rejection = ApiError;

    async fn from_request(req: Request, state: &AppState) -> Result<Self, Self::Rejection> {
        let content_type = req
            .headers()
            .get(header::CONTENT_TYPE)
            .and_then(|v| v.to_str().ok())
            .unwrap_or("");
        if !is_json(content_type) {
            return Err(ApiError::new(
                StatusCode::UNSUPPORTED_MEDIA_TYPE,
                "unsupported_media_type",
                "send the body as application/json",
            ));
        }
        let bytes = read_body(req.into_body(), state.config.body_limit).await?;
        parse_json(&bytes).map(ApiJson)
    }
}

/// Every query parameter is a one-line text: one holding a control character (after
/// percent-decoding) answers 400 naming it, before anything is read or looked up.
pub fn refuse_controls_in_query(query: &str) -> Result<(), ApiError> {
    let pairs: Vec<(String, String)> = serde_urlencoded::from_str(query).unwrap_or_default();
    let Some((name, _)) = pairs
        .iter()
        .find(|(name, value)| text::has_control(name) || text::has_control(value))
    else {
        return Ok(());
    };
    let name = name.escape_debug().to_string();
    let message = format!("{name} must not contain control characters");
    Err(ApiError::bad_param(name, message))
}

/// Query parameters as `T`; a malformed query answers 400 in JSON.
pub struct ApiQuery<T>(pub T);

impl<T: DeserializeOwned> FromRequestParts<AppState> for ApiQuery<T> {
    type Rejection = ApiError;

    async fn from_request_parts(parts: &mut Parts, _: &AppState) -> Result<Self, Self::Rejection> {
        let query = parts.uri.query().unwrap_or("");
        refuse_controls_in_query(query)?;
        serde_urlencoded::from_str(query)
            .map(ApiQuery)
            .map_err(|e| ApiError::bad_request(format!("bad query parameter: {e}")))
    }
}

/// The client's address: the peer of the connection, or, behind a proxy the operator named,
/// the last address in the header it sets.
#[derive(Clone, Debug)]
pub struct ClientAddr(pub String);

impl FromRequestParts<AppState> for ClientAddr {
    type Rejection = std::convert::Infallible;

    async fn from_request_parts(
        parts: &mut Parts,
        state: &AppState,
    ) -> Result<Self, Self::Rejection> {
        Ok(ClientAddr(client_addr(parts, state)))
    }
}

pub fn client_addr(parts: &Parts, state: &AppState) -> String {
    let forwarded = state
        .config
        .forwarded_header
        .as_ref()
        .and_then(|name| parts.headers.get(name))
        .and_then(|v| v.to_str().ok())
        .and_then(|v| v.rsplit(',').next())
        .map(str::trim)
        .filter(|s| !s.is_empty());
    if let Some(last) = forwarded {
        return last.to_string();
    }
    parts
        .extensions
        .get::<ConnectInfo<SocketAddr>>()
        .map(|c| c.0.ip().to_string())
        .unwrap_or_else(|| "unknown".to_string())
}

/// An optional time from a query parameter: empty is absent; anything else must be RFC 3339
/// or a bare date, or the request answers 400 naming the parameter.
pub fn time_param(name: &str, text: &str) -> Result<Option<crate::domain::Timestamp>, ApiError> {
    if text.trim().is_empty() {
        return Ok(None);
    }
    crate::domain::Timestamp::parse(text)
        .map(Some)
        .map_err(|e| ApiError::bad_param(name, format!("{name}: {e}")))
}

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
use crate::domain::Problems;
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

fn bad_json(message: impl Into<String>) -> ApiError {
    ApiError::new(StatusCode::BAD_REQUEST, "bad_json", message)
}

/// The fields `T` reads when it is read from a JSON object (a struct), from its own
/// `Deserialize`: asked once, with a reader that only notes what it is asked for.
fn struct_fields<T: DeserializeOwned>() -> Option<&'static [&'static str]> {
    use serde::de::{Deserializer, Error, Visitor, value};
    struct Probe<'a>(&'a mut Option<&'static [&'static str]>);
    impl<'de> Deserializer<'de> for Probe<'_> {
        type Error = value::Error;
        fn deserialize_any<V: Visitor<'de>>(self, _: V) -> Result<V::Value, value::Error> {
            Err(value::Error::custom("not a struct"))
        }
        fn deserialize_struct<V: Visitor<'de>>(
            self,
            _: &'static str,
            fields: &'static [&'static str],
            _: V,
        ) -> Result<V::Value, value::Error> {
            *self.0 = Some(fields);
            Err(value::Error::custom("noted"))
        }
        serde::forward_to_deserialize_any! {
            bool i8 i16 i32 i64 i128 u8 u16 u32 u64 u128 f32 f64 char str string bytes
            byte_buf option unit unit_struct newtype_struct seq tuple tuple_struct map enum
            identifier ignored_any
        }
    }
    let mut fields = None;
    let _ = T::deserialize(Probe(&mut fields));
    fields
}

/// What a body holds instead of an object, judged by its first character; `None` for an
/// object (or for something that is not JSON at all, which the parser reports).
fn not_an_object(bytes: &[u8]) -> Option<&'static str> {
    match bytes.iter().find(|b| !b.is_ascii_whitespace())? {
        b'[' => Some("an array"),
        b'"' => Some("a string"),
        b't' => Some("true"),
        b'f' => Some("false"),
        b'n' => Some("null"),
        b'-' | b'0'..=b'9' => Some("a number"),
        _ => None,
    }
}

/// The field a `missing field `NAME`` message names.
fn missing_field(message: &str) -> Option<&str> {
    message.strip_prefix("missing field `")?.strip_suffix('`')
}

/// Parses JSON into `T`. Errors say what was expected in the API's words (a JSON object with
/// its fields, a string, a whole number...; `domain::json_errors`), never the program's type
/// names, and name the path of the offending field in the message and in `error.fields`.
pub fn parse_json<T: DeserializeOwned>(bytes: &[u8]) -> Result<T, ApiError> {
    if bytes.iter().all(u8::is_ascii_whitespace) {
        return Err(bad_json("the request body is empty; send a JSON object"));
    }
    if let (Some(fields), Some(got)) = (struct_fields::<T>(), not_an_object(bytes)) {
        return Err(bad_json(format!(
            "the body must be a JSON object with the fields {}; got {got}",
            fields.join(", ")
        )));
    }
    let mut de = serde_json::Deserializer::from_slice(bytes);
    let value: T = serde_path_to_error::deserialize(&mut de).map_err(|e| {
        let path = e.path().to_string();
        let inner = e.into_inner();
        let syntax = matches!(
            inner.classify(),
            serde_json::error::Category::Syntax | serde_json::error::Category::Eof
        );
        if syntax {
            return bad_json(format!("malformed JSON: {inner}"));
        }
        let what = crate::domain::json_errors::describe(&inner);
        let field = if path == "." || path.is_empty() {
            missing_field(&what).map(str::to_string)
        } else {
            Some(path)
        };
        match field {
            Some(field) => {
                let message = if what.contains(&format!("`{field}`")) {
                    what
                } else {
                    format!("{field}: {what}")
                };
                ApiError {
                    fields: Some(Problems::single(&field, message.clone())),
                    ..bad_json(message)
                }
            }
            None => bad_json(format!("the body is not what this endpoint takes: {what}")),
        }
    })?;
    // Anything after the value is malformed too.
    de.end()
        .map_err(|e| bad_json(format!("malformed JSON: {e}")))?;
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

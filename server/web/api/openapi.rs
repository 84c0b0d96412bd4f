//! The OpenAPI 3.1 description of `/api/v1`, generated from the handlers' annotations and the
//! router that serves them (so a route cannot exist without its description), served at
//! `GET /api/v1/openapi.json` and committed as `docs/openapi.json`.
//!
//! Request and response bodies are described by the types that carry them, so a field cannot
//! be added or dropped without the description following; tests also validate real responses
//! against it with a reference validator. The published set is described by
//! `docs/schema/published-set.schema.json` itself, included here, so the two cannot disagree.
//! The error answers operations share, and the answers of the published set's renderings, are
//! described once, below.

use std::collections::BTreeMap;
use std::sync::OnceLock;

use axum::http::{HeaderValue, header};
use axum::response::IntoResponse;
use serde_json::{Value, json};
use utoipa::openapi::content::ContentBuilder;
use utoipa::openapi::header::HeaderBuilder;
use utoipa::openapi::response::{Response, ResponseBuilder};
use utoipa::openapi::security::{ApiKey, ApiKeyValue, HttpAuthScheme, HttpBuilder, SecurityScheme};
use utoipa::openapi::{Ref, RefOr, Schema};
use utoipa::{IntoResponses, Modify, OpenApi, PartialSchema};

use crate::web::error::ErrorBody;

/// The committed JSON Schema of the published set.
const PUBLISHED_SET_SCHEMA: &str = include_str!("../../../docs/schema/published-set.schema.json");

#[derive(OpenApi)]
#[openapi(
    info(
        title = "cutpoints",
        description = "Agree, sign off and publish the thresholds that decide when a dashboard \
            metric needs action. Every endpoint but this document needs a credential: a bearer \
            token (`Authorization: Bearer cpt_...`; read-scope tokens can only read) or a \
            browser session cookie with its CSRF token in `X-CSRF-Token` on unsafe methods. An \
            instance serving with `--public-read` lets anyone read the published set, the keys \
            and evaluate. Errors answer `{\"error\": {\"code\", \"message\", \"fields\"?}}`.\n\n\
            Where a threshold guards people's safety (clinical, workplace or environmental \
            metrics), thresholds agreed here do not replace regulatory limits: defer to local \
            codes and licensed practice.",
        license(name = "Proprietary"),
    ),
    components(schemas(ErrorBody)),
    modifiers(&Security),
    security(("bearer" = []), ("session" = [])),
    tags(
        (name = "register", description = "Metrics and who owns them"),
        (name = "workflow", description = "Proposals, reviews, sign-off and versions"),
        (name = "published", description = "The approved set, for dashboards and pipelines"),
        (name = "audit", description = "The tamper-evident event record"),
        (name = "engine", description = "Classifying values against cut points"),
        (name = "service", description = "About the caller and this description"),
    )
)]
struct ApiDoc;

struct Security;

impl Modify for Security {
    fn modify(&self, openapi: &mut utoipa::openapi::OpenApi) {
        let components = openapi.components.get_or_insert_with(Default::default);
        components.add_security_scheme(
            "bearer",
            SecurityScheme::Http(
                HttpBuilder::new()
                    .scheme(HttpAuthScheme::Bearer)
                    .description(Some(
                        "An API token from `cutpoints token issue` or the admin pages",
                    ))
                    .build(),
            ),
        );
        components.add_security_scheme(
            "session",
            SecurityScheme::ApiKey(ApiKey::Cookie(ApiKeyValue::with_description(
                super::super::auth::SESSION_COOKIE,
                "A browser session from /signin; unsafe methods also need X-CSRF-Token",
            ))),
        );
    }
}

/// The description of everything the router serves under `/api`, as served.
pub fn document() -> &'static Value {
    static DOCUMENT: OnceLock<Value> = OnceLock::new();
    DOCUMENT.get_or_init(|| {
        let (_, openapi) = super::super::api_router().split_for_parts();
        finish(openapi)
    })
}

/// The document as served and committed: pretty-printed JSON and a final newline.
pub fn document_text() -> String {
    let mut text = serde_json::to_string_pretty(document()).expect("a JSON value prints");
    text.push('\n');
    text
}

/// Puts the paths under `/api`, where the router is nested, and adds the published set's
/// JSON Schema as components.
fn finish(openapi: utoipa::openapi::OpenApi) -> Value {
    let mut doc = serde_json::to_value(ApiDoc::openapi().merge_from(openapi))
        .expect("an OpenAPI document serialises");
    let paths: BTreeMap<String, Value> = doc["paths"]
        .as_object()
        .map(|p| {
            p.iter()
                .map(|(k, v)| (format!("/api{k}"), v.clone()))
                .collect()
        })
        .unwrap_or_default();
    doc["paths"] = json!(paths);
    let schemas = doc["components"]["schemas"]
        .as_object_mut()
        .expect("the document has component schemas");
    for (name, schema) in published_set_components() {
        schemas.insert(name, schema);
    }
    doc
}

/// The published set's JSON Schema as OpenAPI components: the document itself as
/// `PublishedSet`, each of its `$defs` as `PublishedSet` + the name, capitalised, with the
/// references pointed at them.
fn published_set_components() -> Vec<(String, Value)> {
    fn component(def: &str) -> String {
        let mut chars = def.chars();
        let first = chars.next().map(|c| c.to_ascii_uppercase());
        format!(
            "PublishedSet{}{}",
            first.into_iter().collect::<String>(),
            chars.as_str()
        )
    }
    fn repoint(v: &mut Value) {
        match v {
            Value::Object(map) => {
                if let Some(Value::String(r)) = map.get_mut("$ref")
                    && let Some(def) = r.strip_prefix("#/$defs/")
                {
                    *r = format!("#/components/schemas/{}", component(def));
                }
                map.values_mut().for_each(repoint);
            }
            Value::Array(items) => items.iter_mut().for_each(repoint),
            _ => {}
        }
    }
    let mut root: Value =
        serde_json::from_str(PUBLISHED_SET_SCHEMA).expect("the committed schema is JSON");
    let map = root.as_object_mut().expect("the schema is an object");
    map.remove("$schema");
    let id = map.remove("$id");
    let defs = map.remove("$defs").unwrap_or_else(|| json!({}));
    if let Some(Value::String(id)) = id {
        map.insert(
            "description".into(),
            json!(format!(
                "{} (JSON Schema {id}, docs/schema/published-set.schema.json)",
                map["description"].as_str().unwrap_or_default()
            )),
        );
    }
    let mut out = vec![("PublishedSet".to_string(), root)];
    for (name, def) in defs.as_object().into_iter().flatten() {
        out.push((component(name), def.clone()));
    }
    for (_, schema) in &mut out {
        repoint(schema);
    }
    out
}

/// `GET /api/v1/openapi.json`: this description. Needs no credential.
#[utoipa::path(
    get,
    path = "/v1/openapi.json", operation_id = "getOpenApi",
    tag = "service",
    security(()),
    responses((status = 200, description = "The OpenAPI 3.1 description of /api/v1", content_type = "application/json"))
)]
pub async fn openapi_json() -> axum::response::Response {
    static TEXT: OnceLock<bytes::Bytes> = OnceLock::new();
    let body = TEXT.get_or_init(|| bytes::Bytes::from(document_text()));
    (
        [(
            header::CONTENT_TYPE,
            HeaderValue::from_static("application/json"),
        )],
        body.clone(),
    )
        .into_response()
}

/// Declares the error answers operations share, as one table: for each, a type named for the
/// answer (an operation lists it by name in `responses(...)`), its status, its description,
/// and for answers that say when to try again, what their Retry-After header holds. Each
/// answers the error body.
macro_rules! error_answers {
    ($($name:ident = $status:tt, $description:tt $(, retry_after $seconds:tt)?;)+) => {$(
        #[doc = $description]
        #[derive(IntoResponses)]
        #[response(
            status = $status
            $(, headers(("Retry-After" = u64, description = $seconds)))?
        )]
        pub struct $name(pub ErrorBody);
    )+};
}

error_answers! {
    BadRequest = 400, "Malformed request, or invalid fields each named in error.fields";
    Unauthenticated = 401, "No valid credential";
    Forbidden = 403, "The caller may not do this: not their role, a read-scope token, \
        or a browser session without its X-CSRF-Token";
    NotFound = 404, "No such metric, proposal, revision or version; the message says which";
    ProposalMovedOn = 409, "The proposal moved on: stale revision hash or wrong state";
    TooLarge = 413, "The body is larger than this operation accepts";
    NotJson = 415, "The body is not application/json";
    Throttled = 429, "Too many wrong passwords: try again after Retry-After seconds",
        retry_after "Seconds until the next attempt is taken";
    Unavailable = 503, "The database is busy with other changes or not answering; nothing \
        was changed. Try again after Retry-After seconds",
        retry_after "Seconds to wait before trying again";
}

/// The answers of an endpoint serving a rendering of a set: 200 with the body as
/// `description` and `content` say and the headers `published::send` sets, or 304 without a body.
fn set_answers(
    description: &str,
    content_type: &str,
    content: ContentBuilder,
) -> BTreeMap<String, RefOr<Response>> {
    let header = |schema: RefOr<Schema>, description: &str| {
        HeaderBuilder::new()
            .schema(Some(schema))
            .description(Some(description))
            .build()
    };
    let text = || String::schema();
    let ok = ResponseBuilder::new()
        .description(description)
        .content(content_type, content)
        .header(
            "ETag",
            header(text(), "Strong entity tag: the SHA-256 of the body"),
        )
        .header(
            "Content-Digest",
            header(text(), "RFC 9530 sha-256 of the body"),
        )
        .header(
            "Cache-Control",
            header(text(), "no-cache: revalidate with If-None-Match"),
        )
        .header(
            "Cutpoints-Set-Revision",
            header(i64::schema(), "The set revision"),
        )
        .header(
            "Cutpoints-Set-Digest",
            header(text(), "meta.digest of the set"),
        );
    let not_modified = ResponseBuilder::new()
        .description("If-None-Match matched the current entity tag (RFC 9110 §13.1.2); no body");
    BTreeMap::from([
        ("200".to_string(), ok.into()),
        ("304".to_string(), not_modified.into()),
    ])
}

/// The content of a JSON rendering: the published set's own schema.
fn json_set() -> ContentBuilder {
    ContentBuilder::new().schema(Some(Ref::from_schema_name("PublishedSet")))
}

/// The answers of `GET /api/v1/published`.
pub struct SetAnswers;

impl IntoResponses for SetAnswers {
    fn responses() -> BTreeMap<String, RefOr<Response>> {
        let description = "The set in force: RFC 8785 canonical JSON, signed";
        set_answers(description, "application/json", json_set())
    }
}

/// The answers of `GET /api/v1/published.csv`.
pub struct SetCsvAnswers;

impl IntoResponses for SetCsvAnswers {
    fn responses() -> BTreeMap<String, RefOr<Response>> {
        let description = "The set as RFC 4180 CSV, one row per metric, with a header row";
        let csv = ContentBuilder::new().schema(Some(String::schema()));
        set_answers(description, "text/csv", csv)
    }
}

/// The answers of `GET /api/v1/published/{key}` when the metric has a version in force.
pub struct MetricSetAnswers;

impl IntoResponses for MetricSetAnswers {
    fn responses() -> BTreeMap<String, RefOr<Response>> {
        let description = "The set narrowed to one metric, with its own digest and signature";
        set_answers(description, "application/json", json_set())
    }
}

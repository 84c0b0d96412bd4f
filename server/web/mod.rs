//! HTTP: the JSON API, the pages, and the middleware every request passes (security headers,
//! body limits, who is calling and the CSRF checks).

pub mod api;
pub mod auth;
pub mod diff_html;
pub mod error;
pub mod extract;
pub mod layout;
pub mod pages;
pub mod redirect;
pub mod templates;

use std::future::Future;
use std::net::SocketAddr;
use std::sync::Arc;

use axum::extract::{DefaultBodyLimit, Request, State};
use axum::http::{HeaderName, HeaderValue, StatusCode, header};
use axum::middleware::{self, Next};
use axum::response::{IntoResponse, Redirect, Response};
use axum::routing::{get, post};
use axum::{Json, Router};
use serde_json::json;
use tokio::net::TcpListener;

use crate::ops::Store;
use error::{ApiError, PageError};

/// Settings of the web layer.
#[derive(Clone, Debug)]
pub struct WebConfig {
    /// Mark cookies Secure and send HSTS: the site is reached over https (through a proxy
    /// that terminates TLS).
    pub secure_cookies: bool,
    /// The header a trusted reverse proxy sets to the client's address, if any.
    pub forwarded_header: Option<HeaderName>,
    /// Largest JSON body the API accepts.
    pub body_limit: usize,
    /// Anyone may read the published set, the keys and evaluate, without credentials.
    pub public_read: bool,
    /// Largest history upload (CSV or JSON) the API and pages accept.
    pub upload_limit: usize,
}

impl Default for WebConfig {
    fn default() -> Self {
        WebConfig {
            secure_cookies: false,
            forwarded_header: None,
            body_limit: 2 * 1024 * 1024,
            public_read: false,
            upload_limit: 64 * 1024 * 1024,
        }
    }
}

/// What every handler can reach.
#[derive(Clone, Debug)]
pub struct AppState(Arc<Shared>);

/// The parts of [`AppState`]. Kept behind one `Arc`, so that the several clones a request
/// makes (router, middleware, handler) each cost one reference count, not one per part: on
/// the serving threads those counts are shared memory that every request touches.
#[derive(Debug)]
pub struct Shared {
    pub store: Store,
    pub config: Arc<WebConfig>,
    pub publisher: Arc<crate::publish::Publisher>,
    pub tokens: Arc<crate::ops::access::TokenCache>,
    pub exceptions: Arc<crate::ops::audit::ExceptionsCache>,
}

impl std::ops::Deref for AppState {
    type Target = Shared;

    fn deref(&self) -> &Shared {
        &self.0
    }
}

impl AppState {
    pub fn new(store: Store, config: WebConfig, signer: crate::publish::Signer) -> AppState {
        AppState(Arc::new(Shared {
            store,
            config: Arc::new(config),
            publisher: Arc::new(crate::publish::Publisher::new(signer)),
            tokens: Arc::default(),
            exceptions: Arc::default(),
        }))
    }
}

/// Headers of the OWASP HTTP Headers Cheat Sheet on every response: a CSP that allows no
/// script at all, no framing, no sniffing, no referrer, and no caching of signed-in pages
/// unless a handler chose otherwise.
async fn security_headers(State(state): State<AppState>, req: Request, next: Next) -> Response {
    let mut response = next.run(req).await;
    let h = response.headers_mut();
    let set = |h: &mut axum::http::HeaderMap, name: HeaderName, value: &'static str| {
        h.entry(name).or_insert(HeaderValue::from_static(value));
    };
    set(
        h,
        header::CONTENT_SECURITY_POLICY,
        "default-src 'none'; style-src 'self'; img-src 'self' data:; form-action 'self'; \
         frame-ancestors 'none'; base-uri 'none'",
    );
    set(h, header::X_FRAME_OPTIONS, "DENY");
    set(h, header::X_CONTENT_TYPE_OPTIONS, "nosniff");
    set(h, header::REFERRER_POLICY, "no-referrer");
    set(
        h,
        HeaderName::from_static("cross-origin-opener-policy"),
        "same-origin",
    );
    set(
        h,
        HeaderName::from_static("cross-origin-resource-policy"),
        "same-origin",
    );
    set(
        h,
        HeaderName::from_static("permissions-policy"),
        "camera=(), microphone=(), geolocation=()",
    );
    set(h, header::CACHE_CONTROL, "no-store");
    if state.config.secure_cookies {
        set(
            h,
            header::STRICT_TRANSPORT_SECURITY,
            "max-age=31536000; includeSubDomains",
        );
    }
    response
}

/// `GET /healthz`: 200 when the database answers, 503 when it does not.
async fn healthz(State(state): State<AppState>) -> Response {
    if state.store.is_healthy().await {
        Json(json!({"status": "ok", "database": state.store.backend().name()})).into_response()
    } else {
        (
            StatusCode::SERVICE_UNAVAILABLE,
            [(header::RETRY_AFTER, error::UNAVAILABLE_RETRY_SECONDS)],
            Json(json!({"error": {"code": "unavailable", "message": "the database is not answering"}})),
        )
            .into_response()
    }
}

async fn style_css() -> Response {
    (
        [
            (header::CONTENT_TYPE, "text/css; charset=utf-8"),
            (header::CACHE_CONTROL, "public, max-age=3600"),
        ],
        templates::STYLE_CSS,
    )
        .into_response()
}

async fn home() -> Redirect {
    Redirect::to("/metrics")
}

async fn page_not_found() -> PageError {
    PageError(ApiError::not_found("there is no page at this address"))
}

/// The routes under `/api`, each registered with its OpenAPI description, so none can be
/// served undescribed (see `api::openapi`).
pub(crate) fn api_router() -> utoipa_axum::router::OpenApiRouter<AppState> {
    use api::audit as a;
    use api::evidence as e;
    use api::metrics as m;
    use api::proposals as p;
    use api::published as pb;
    use utoipa_axum::routes;
    utoipa_axum::router::OpenApiRouter::new()
        .routes(routes!(api::openapi::openapi_json))
        .routes(routes!(api::me))
        .routes(routes!(api::classify::classify))
        .routes(routes!(m::list, m::create))
        .routes(routes!(m::show, m::edit))
        .routes(routes!(p::create))
        .routes(routes!(p::history))
        .routes(routes!(p::show, p::revise))
        .routes(routes!(p::submit))
        .routes(routes!(p::comment))
        .routes(routes!(p::review))
        .routes(routes!(p::signoff))
        .routes(routes!(p::withdraw))
        .routes(routes!(p::reject))
        .routes(routes!(p::inbox))
        .routes(routes!(e::upload, e::observations))
        .routes(routes!(e::observations_csv))
        .routes(routes!(e::show))
        .routes(routes!(e::proposal))
        .routes(routes!(e::version))
        .routes(routes!(pb::set))
        .routes(routes!(pb::set_csv))
        .routes(routes!(pb::changes))
        .routes(routes!(pb::one))
        .routes(routes!(pb::keys))
        .routes(routes!(pb::evaluate))
        .routes(routes!(a::events))
        .routes(routes!(a::events_csv))
        .routes(routes!(a::verify))
        .routes(routes!(a::start_full_check))
        .routes(routes!(a::full_check))
        .routes(routes!(a::exceptions))
        .routes(routes!(a::as_of))
        .routes(routes!(a::timeline))
}

fn api_routes(config: &WebConfig) -> Router<AppState> {
    let (router, _) = api_router().split_for_parts();
    router
        .fallback(api::not_found)
        .method_not_allowed_fallback(api::method_not_allowed)
        .layer(DefaultBodyLimit::max(config.body_limit))
}

fn page_routes(config: &WebConfig) -> Router<AppState> {
    use pages::{admin, metrics, proposals, signin};
    Router::new()
        .route("/", get(home))
        .route("/signin", get(signin::show).post(signin::submit))
        .route("/signout", post(signin::signout))
        .route("/metrics", get(metrics::list))
        .route("/metrics/new", get(metrics::new_form).post(metrics::create))
        .route("/metrics/{key}", get(metrics::detail))
        .route(
            "/metrics/{key}/observations",
            post(pages::evidence::upload).layer(DefaultBodyLimit::max(config.upload_limit)),
        )
        .route(
            "/metrics/{key}/edit",
            get(metrics::edit_form).post(metrics::edit),
        )
        .route("/inbox", get(proposals::inbox))
        .route("/published", get(pages::published::set))
        .route("/published/changes", get(pages::published::changes))
        .route("/audit", get(pages::audit::index))
        .route("/audit/full-checks", post(pages::audit::start_full_check))
        .route("/audit/metrics/{key}", get(pages::audit::timeline))
        .route("/audit/as-of", get(pages::audit::as_of))
        .route("/audit/exceptions", get(pages::audit::exceptions))
        .route("/audit/events", get(pages::audit::events))
        .route(
            "/metrics/{key}/proposals/new",
            get(proposals::new_form).post(proposals::create),
        )
        .route("/proposals/{id}", get(proposals::show))
        .route(
            "/proposals/{id}/edit",
            get(proposals::edit_form).post(proposals::revise),
        )
        .route("/proposals/{id}/submit", post(proposals::submit))
        .route("/proposals/{id}/comments", post(proposals::comment))
        .route("/proposals/{id}/reviews", post(proposals::review))
        .route(
            "/proposals/{id}/signoff",
            get(proposals::signoff_page).post(proposals::signoff),
        )
        .route("/proposals/{id}/withdraw", post(proposals::withdraw))
        .route("/proposals/{id}/reject", post(proposals::reject))
        .route("/admin/users", get(admin::users_list))
        .route(
            "/admin/users/new",
            get(admin::user_new_form).post(admin::user_create),
        )
        .route(
            "/admin/users/{username}",
            get(admin::user_detail).post(admin::user_update),
        )
        .route("/admin/users/{username}/active", post(admin::user_active))
        .route(
            "/admin/users/{username}/password",
            post(admin::user_password),
        )
        .route(
            "/admin/tokens",
            get(admin::tokens_list).post(admin::token_issue),
        )
        .route("/admin/tokens/{id}/revoke", post(admin::token_revoke))
        .layer(DefaultBodyLimit::max(auth::FORM_LIMIT))
}

/// The whole application.
pub fn app(state: AppState) -> Router {
    templates::load();
    Router::new()
        .route("/healthz", get(healthz))
        .route("/static/style.css", get(style_css))
        .merge(page_routes(&state.config))
        .nest("/api", api_routes(&state.config))
        .fallback(page_not_found)
        .layer(middleware::from_fn_with_state(state.clone(), auth::resolve))
        .layer(middleware::from_fn_with_state(
            state.clone(),
            security_headers,
        ))
        .with_state(state)
}

/// Listening sockets for [`serve_on_threads`]: `count` sockets on one address (SO_REUSEPORT,
/// so the kernel spreads new connections over them). With port 0 the first socket picks the
/// port and the others share it. Where the platform has no SO_REUSEPORT, one socket.
pub async fn listeners(
    addr: SocketAddr,
    count: usize,
) -> std::io::Result<Vec<std::net::TcpListener>> {
    // A plain bind first: SO_REUSEPORT would let a second server on the same port start
    // and silently take half the connections; this way it fails as it always did.
    if addr.port() != 0 {
        drop(std::net::TcpListener::bind(addr)?);
    }
    let mut out = Vec::new();
    let mut at = addr;
    for _ in 0..count.max(1) {
        let socket = if at.is_ipv4() {
            tokio::net::TcpSocket::new_v4()?
        } else {
            tokio::net::TcpSocket::new_v6()?
        };
        socket.set_reuseaddr(true)?;
        #[cfg(unix)]
        socket.set_reuseport(true)?;
        socket.bind(at)?;
        let listener = socket.listen(1024)?;
        at = listener.local_addr()?;
        out.push(listener.into_std()?);
        if cfg!(not(unix)) {
            break;
        }
    }
    Ok(out)
}

/// Serves `app(state)` with one OS thread per listener, each running its own single-threaded
/// runtime, so that a request is read, answered and written on one thread, with no wake-ups
/// across threads (the cost that dominated small answers such as 304s; docs/benchmarks.md).
/// When `shutdown` completes, every thread stops accepting and finishes its requests in
/// flight. The store's pool and the caches are shared by all threads.
pub async fn serve_on_threads(
    listeners: Vec<std::net::TcpListener>,
    state: AppState,
    shutdown: impl Future<Output = ()> + Send + 'static,
) -> std::io::Result<()> {
    let (stop, stopped) = tokio::sync::watch::channel(false);
    let upkeep = tokio::spawn(crate::ops::upkeep::run(state.store.clone(), {
        let mut stopped = stopped.clone();
        async move {
            let _ = stopped.wait_for(|stop| *stop).await;
        }
    }));
    let mut threads = Vec::new();
    for (i, listener) in listeners.into_iter().enumerate() {
        let state = state.clone();
        let mut stopped = stopped.clone();
        let thread = std::thread::Builder::new()
            .name(format!("cutpoints-http-{i}"))
            .spawn(move || -> std::io::Result<()> {
                let runtime = tokio::runtime::Builder::new_current_thread()
                    .enable_all()
                    .build()?;
                runtime.block_on(async move {
                    listener.set_nonblocking(true)?;
                    let listener = TcpListener::from_std(listener)?;
                    axum::serve(
                        listener,
                        app(state).into_make_service_with_connect_info::<SocketAddr>(),
                    )
                    .with_graceful_shutdown(async move {
                        let _ = stopped.wait_for(|stop| *stop).await;
                    })
                    .await
                })
            })?;
        threads.push(thread);
    }
    shutdown.await;
    let _ = stop.send(true);
    let served = tokio::task::spawn_blocking(move || {
        for thread in threads {
            thread
                .join()
                .map_err(|_| std::io::Error::other("a serving thread panicked"))??;
        }
        Ok(())
    })
    .await
    .map_err(std::io::Error::other)?;
    let _ = upkeep.await;
    served
}

/// Serves `app(state)` on `listener` until `shutdown` completes, then finishes the requests
/// in flight.
pub async fn serve(
    listener: TcpListener,
    state: AppState,
    shutdown: impl Future<Output = ()> + Send + 'static,
) -> std::io::Result<()> {
    let (stop, stopped) = tokio::sync::oneshot::channel::<()>();
    let upkeep = tokio::spawn(crate::ops::upkeep::run(state.store.clone(), async {
        let _ = stopped.await;
    }));
    let served = axum::serve(
        listener,
        app(state).into_make_service_with_connect_info::<SocketAddr>(),
    )
    .with_graceful_shutdown(shutdown)
    .await;
    let _ = stop.send(());
    let _ = upkeep.await;
    served
}

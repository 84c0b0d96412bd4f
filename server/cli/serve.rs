//! `serve`: the web application on its listening sockets until a shutdown signal, and the
//! listening and shutting down the `demo` command shares.

use anyhow::Context;
use axum::http::HeaderName;
use tokio::net::TcpListener;

use super::ServeArgs;
use super::terminal::explain;
use crate::ops::Store;
use crate::ops::users as user_ops;
use crate::web::{AppState, WebConfig};

pub(super) async fn shutdown_signal() {
    let ctrl_c = async {
        let _ = tokio::signal::ctrl_c().await;
    };
    #[cfg(unix)]
    let terminate = async {
        match tokio::signal::unix::signal(tokio::signal::unix::SignalKind::terminate()) {
            Ok(mut s) => {
                s.recv().await;
            }
            Err(_) => std::future::pending::<()>().await,
        }
    };
    #[cfg(not(unix))]
    let terminate = std::future::pending::<()>();
    tokio::select! {
        _ = ctrl_c => {},
        _ = terminate => {},
    }
    tracing::info!("shutting down: finishing requests in flight");
}

pub(super) async fn bind(addr: &str) -> anyhow::Result<TcpListener> {
    TcpListener::bind(addr).await.with_context(|| {
        format!("cannot listen on {addr} (is another server using it? choose one with --bind)")
    })
}

fn web_config(args: &ServeArgs) -> anyhow::Result<WebConfig> {
    let forwarded_header = match &args.forwarded_header {
        Some(name) if !name.trim().is_empty() => Some(
            HeaderName::try_from(name.trim())
                .with_context(|| format!("--forwarded-header {name:?} is not a header name"))?,
        ),
        _ => None,
    };
    Ok(WebConfig {
        secure_cookies: args.secure_cookies,
        forwarded_header,
        public_read: args.public_read,
        ..WebConfig::default()
    })
}

pub(super) async fn serve(args: ServeArgs) -> anyhow::Result<()> {
    let config = web_config(&args)?;
    let store = if args.skip_migrations {
        Store::open_migrated(&args.db.database_url, args.db.settings()).await?
    } else {
        args.db.open().await?
    };
    if user_ops::count(&store).await.map_err(explain)? == 0 {
        tracing::warn!(
            "no people yet: add the first admin with `cutpoints user add --username NAME --role admin --password-stdin`"
        );
    }
    let signer = crate::publish::signing::load_or_create(&store, &args.key.signing_key).await?;
    let threads = match args.http_threads {
        0 => std::thread::available_parallelism().map_or(1, |n| n.get()),
        n => n,
    };
    let addr = tokio::net::lookup_host(&args.bind)
        .await
        .ok()
        .and_then(|mut found| found.next())
        .with_context(|| format!("--bind {:?} is not an address and port", args.bind))?;
    let listeners = crate::web::listeners(addr, threads)
        .await
        .with_context(|| {
            format!(
                "cannot listen on {} (is another server using it? choose one with --bind)",
                args.bind
            )
        })?;
    tracing::info!(
        address = %listeners[0].local_addr()?,
        threads = listeners.len(),
        database = store.backend().name(),
        key_id = signer.key_id(),
        "cutpoints is serving"
    );
    crate::web::serve_on_threads(
        listeners,
        AppState::new(store, config, signer),
        shutdown_signal(),
    )
    .await?;
    Ok(())
}

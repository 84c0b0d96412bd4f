//! The `demo` command: the web application on a fresh database seeded with an invented
//! scenario, Quillfield Cycle Commons, a city bike-share cooperative. The scenario as data
//! (`scenario.rs`), its invented metric histories (`history.rs`) and the seeding of an empty
//! database with it through the operations (`seed.rs`).

mod history;
mod scenario;
mod seed;

use std::path::PathBuf;

use anyhow::{Context, bail};

use crate::cli::DemoArgs;
use crate::cli::serve::{bind, shutdown_signal};
use crate::cli::terminal::explain;
use crate::ops::Store;
use crate::web::{AppState, WebConfig};

pub use scenario::{DemoPerson, PEOPLE};
pub use seed::seed;

/// A fresh folder under the system's temporary one for the demo's database and signing key.
fn demo_folder() -> anyhow::Result<PathBuf> {
    let name = crate::auth::secret::random_token("cutpoints-demo")
        .chars()
        .take(28)
        .map(|c| {
            if c.is_ascii_alphanumeric() || c == '-' {
                c
            } else {
                'x'
            }
        })
        .collect::<String>();
    let dir = std::env::temp_dir().join(name);
    std::fs::create_dir_all(&dir)
        .with_context(|| format!("cannot create the demo folder {}", dir.display()))?;
    Ok(dir)
}

/// Seeds the scenario into an empty database, prints a login for each person and serves the
/// application until a shutdown signal.
pub(super) async fn demo(args: DemoArgs) -> anyhow::Result<()> {
    let folder = demo_folder()?;
    let url = match &args.database_url {
        Some(url) => url.clone(),
        None => format!("sqlite://{}", folder.join("demo.db").display()),
    };
    let store = Store::open(&url).await?;
    if store.holds_data().await? {
        bail!(
            "{url} already holds data; the demo only seeds an empty database (omit --database-url for a fresh one)"
        );
    }
    seed(&store).await.map_err(explain)?;
    let signer =
        crate::publish::signing::load_or_create(&store, &folder.join("signing.key")).await?;
    let listener = bind(&args.bind).await?;
    let addr = listener.local_addr()?;
    println!("cutpoints demo: Quillfield Cycle Commons, an invented bike-share cooperative");
    println!("database: {url}");
    println!();
    println!("Open http://{addr}/ and sign in as one of:");
    println!(
        "  {:<8} {:<20} {:<18} roles",
        "username", "password", "name"
    );
    for p in PEOPLE {
        println!(
            "  {:<8} {:<20} {:<18} {}",
            p.username,
            p.password(),
            p.display_name,
            p.roles
        );
    }
    println!();
    println!("Press Ctrl-C to stop.");
    crate::web::serve(
        listener,
        AppState::new(store, WebConfig::default(), signer),
        shutdown_signal(),
    )
    .await?;
    Ok(())
}

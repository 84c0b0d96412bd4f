//! The subcommands that talk to the database or serve the web application.

use std::io::BufRead;
use std::path::PathBuf;
use std::process::ExitCode;

use anyhow::{Context, bail};
use axum::http::HeaderName;
use tokio::net::TcpListener;

use super::{
    AuditCommand, Command, DemoArgs, ExportArgs, KeysCommand, ObservationsCommand, PolicyCommand,
    ServeArgs, TokenCommand, UserCommand,
};
use crate::domain::Timestamp;
use crate::domain::access::Scope;
use crate::ops::OpError;
use crate::ops::Store;
use crate::ops::users::{self as user_ops, By, NewUser};
use crate::web::{AppState, WebConfig};

/// Runs a subcommand; a command that checks something (`audit verify`) may end with a code
/// other than success without having failed to run.
pub async fn run(command: Command) -> anyhow::Result<ExitCode> {
    if let Command::Audit(cmd) = command {
        return audit(cmd).await;
    }
    match command {
        Command::Serve(args) => serve(args).await,
        Command::Demo(args) => demo(args).await,
        Command::Migrate(db) => {
            let store = Store::connect_with(&db.database_url, db.settings()).await?;
            store.migrate().await?;
            println!("migrated {}", store.backend().name());
            Ok(())
        }
        Command::User(cmd) => user(cmd).await,
        Command::Token(cmd) => token(cmd).await,
        Command::Policy(cmd) => policy(cmd).await,
        Command::Observations(cmd) => observations(cmd).await,
        Command::Export(args) => export(args).await,
        Command::Keys(cmd) => keys(cmd).await,
        Command::Audit(_) => unreachable!("handled above"),
        Command::Classify(_) | Command::Openapi => unreachable!("runs without the runtime"),
    }
    .map(|()| ExitCode::SUCCESS)
}

/// Turns an operation's error into one line for the terminal, listing every field problem.
fn explain(e: OpError) -> anyhow::Error {
    match e {
        OpError::Invalid(p) => anyhow::anyhow!(
            "{}",
            p.0.iter()
                .map(|f| f.message.clone())
                .collect::<Vec<_>>()
                .join("; ")
        ),
        other => anyhow::anyhow!("{other}"),
    }
}

fn read_password() -> anyhow::Result<String> {
    let mut line = String::new();
    std::io::stdin()
        .lock()
        .read_line(&mut line)
        .context("cannot read the password from standard input")?;
    let password = line.trim_end_matches(['\n', '\r']).to_string();
    if password.is_empty() {
        bail!(
            "no password on standard input: pipe it in, e.g. `printf '%s\\n' \"$PW\" | cutpoints user add ...`"
        );
    }
    Ok(password)
}

async fn shutdown_signal() {
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

async fn bind(addr: &str) -> anyhow::Result<TcpListener> {
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

async fn serve(args: ServeArgs) -> anyhow::Result<()> {
    let config = web_config(&args)?;
    let store = if args.skip_migrations {
        Store::open_migrated(&args.db.database_url, args.db.settings()).await?
    } else {
        Store::open_with(&args.db.database_url, args.db.settings()).await?
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

async fn demo(args: DemoArgs) -> anyhow::Result<()> {
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
    super::demo::seed(&store).await.map_err(explain)?;
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
    for p in super::demo::PEOPLE {
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

async fn user(cmd: UserCommand) -> anyhow::Result<()> {
    match cmd {
        UserCommand::Add {
            username,
            role,
            display_name,
            password_stdin: _,
            db,
        } => {
            let password = read_password()?;
            let store = Store::open_with(&db.database_url, db.settings()).await?;
            let input = NewUser {
                username,
                display_name,
                roles: role,
                password,
            };
            let user = user_ops::add(&store, By::Operator, &input)
                .await
                .map_err(explain)?;
            println!(
                "added {} ({}) with roles {}",
                user.username,
                user.display_name,
                user.roles.to_list()
            );
        }
        UserCommand::List { db } => {
            let store = Store::open_with(&db.database_url, db.settings()).await?;
            for u in user_ops::list(&store).await.map_err(explain)? {
                println!(
                    "{}\t{}\t{}\t{}",
                    u.username,
                    u.roles.to_list(),
                    if u.active { "active" } else { "deactivated" },
                    u.display_name
                );
            }
        }
        UserCommand::SetRoles { username, role, db } => {
            let store = Store::open_with(&db.database_url, db.settings()).await?;
            let user = user_ops::set_roles(&store, By::Operator, &username, &role)
                .await
                .map_err(explain)?;
            println!("{} now has roles {}", user.username, user.roles.to_list());
        }
        UserCommand::Deactivate { username, db } => {
            let store = Store::open_with(&db.database_url, db.settings()).await?;
            user_ops::set_active(&store, By::Operator, &username, false)
                .await
                .map_err(explain)?;
            println!("deactivated {username}");
        }
        UserCommand::Activate { username, db } => {
            let store = Store::open_with(&db.database_url, db.settings()).await?;
            user_ops::set_active(&store, By::Operator, &username, true)
                .await
                .map_err(explain)?;
            println!("activated {username}");
        }
        UserCommand::ResetPassword {
            username,
            password_stdin: _,
            db,
        } => {
            let password = read_password()?;
            let store = Store::open_with(&db.database_url, db.settings()).await?;
            user_ops::reset_password(&store, By::Operator, &username, &password)
                .await
                .map_err(explain)?;
            println!("reset the password of {username}; their sessions ended");
        }
    }
    Ok(())
}

async fn token(cmd: TokenCommand) -> anyhow::Result<()> {
    match cmd {
        TokenCommand::Issue {
            username,
            scope,
            label,
            expires_in_days,
            db,
        } => {
            let scope = Scope::parse(&scope).map_err(anyhow::Error::msg)?;
            let store = Store::open_with(&db.database_url, db.settings()).await?;
            let expires_at = expires_in_days.map(|d| Timestamp::now().plus_seconds(d * 86_400));
            let (secret, _) =
                user_ops::issue_token(&store, By::Operator, &username, scope, &label, expires_at)
                    .await
                    .map_err(explain)?;
            println!("{secret}");
        }
        TokenCommand::List { username, db } => {
            let store = Store::open_with(&db.database_url, db.settings()).await?;
            let now = Timestamp::now();
            println!("id\tprefix\tusername\tscope\tstatus\texpires_at\tlabel");
            for t in user_ops::list_tokens(&store, By::Operator, username.as_deref())
                .await
                .map_err(explain)?
            {
                let status = if t.revoked_at.is_some() {
                    "revoked"
                } else if t.is_usable(now) {
                    "usable"
                } else {
                    "expired"
                };
                println!(
                    "{}\t{}\t{}\t{}\t{}\t{}\t{}",
                    t.id,
                    t.prefix,
                    t.username,
                    t.scope.as_str(),
                    status,
                    t.expires_at
                        .map(|e| e.to_string())
                        .unwrap_or_else(|| "never".into()),
                    t.label
                );
            }
        }
        TokenCommand::Revoke { id, db } => {
            let store = Store::open_with(&db.database_url, db.settings()).await?;
            let t = user_ops::revoke_token(&store, By::Operator, id)
                .await
                .map_err(explain)?;
            println!("revoked token {} ({}) of {}", t.id, t.prefix, t.username);
        }
    }
    Ok(())
}

async fn observations(cmd: ObservationsCommand) -> anyhow::Result<()> {
    use crate::domain::observations::Mode;
    use crate::ops::uploads::{self, Format, Uploader};
    use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};
    use sha2::{Digest, Sha256};
    let ObservationsCommand::Import {
        metric,
        mode,
        quiet,
        file,
        db,
    } = cmd;
    let mode = if mode == "replace" {
        Mode::Replace
    } else {
        Mode::Merge
    };
    let store = Store::open_with(&db.database_url, db.settings()).await?;
    // The metric first, so a wrong key is said before a large file is read.
    crate::ops::metrics::get(&store, &metric)
        .await
        .map_err(explain)?;
    let bytes = std::fs::read(&file).with_context(|| format!("reading {}", file.display()))?;
    let bar = ProgressBar::new(bytes.len() as u64);
    if quiet {
        bar.set_draw_target(ProgressDrawTarget::hidden());
    }
    bar.set_style(
        ProgressStyle::with_template("{msg:>8} [{bar:40}] {percent:>3}% {pos}/{len}")
            .expect("a valid template")
            .progress_chars("=> "),
    );
    bar.set_message("reading");
    let sha256 = hex::encode(Sha256::digest(&bytes));
    let parsed = {
        let bar = bar.clone();
        tokio::task::spawn_blocking(move || {
            uploads::parse(Format::Csv, &bytes, |read| bar.set_position(read))
        })
        .await?
    };
    let rows = match parsed {
        Ok(rows) => rows,
        Err(problems) => {
            bar.finish_and_clear();
            for p in &problems {
                eprintln!("{}: {}", file.display(), p.describe());
            }
            anyhow::bail!(
                "{} problem{} in {}; nothing was changed",
                problems.len(),
                if problems.len() == 1 { "" } else { "s" },
                file.display()
            );
        }
    };
    bar.set_message("writing");
    bar.set_length(rows.len() as u64);
    bar.set_position(0);
    let report = uploads::store_rows(&store, Uploader::Cli, &metric, mode, &rows, &sha256, |n| {
        bar.set_position(n)
    })
    .await
    .map_err(explain)?;
    bar.set_message("tidying");
    // The history this upload replaced goes now, not at some later start-up.
    crate::ops::upkeep::once(&store).await;
    bar.finish_and_clear();
    println!(
        "{}: {} rows ({} added, {} replaced, {} removed); {} periods stored; sha256 {}; event {}",
        report.metric,
        report.rows,
        report.added,
        report.replaced,
        report.removed,
        report.total,
        report.sha256,
        report.event_seq
    );
    Ok(())
}

async fn policy(cmd: PolicyCommand) -> anyhow::Result<()> {
    let (db, reviewers_required) = match cmd {
        PolicyCommand::Set {
            reviewers_required,
            db,
        } => (db, reviewers_required),
        PolicyCommand::Show { db } => (db, None),
    };
    let store = Store::open_with(&db.database_url, db.settings()).await?;
    if let Some(n) = reviewers_required {
        crate::ops::proposals::set_reviewers_required(&store, By::Operator, n)
            .await
            .map_err(explain)?;
    }
    let n = crate::ops::proposals::reviewers_required(&store)
        .await
        .map_err(explain)?;
    println!("reviewers_required = {n}");
    Ok(())
}

async fn audit(cmd: AuditCommand) -> anyhow::Result<ExitCode> {
    let AuditCommand::Verify { known_head, db } = cmd;
    let known = known_head
        .as_deref()
        .map(crate::audit::parse_known_head)
        .transpose()
        .map_err(|e| anyhow::anyhow!("--known-head {e}"))?;
    let store = Store::open_with(&db.database_url, db.settings()).await?;
    let v = crate::ops::audit::verify_as_operator(&store, known)
        .await
        .map_err(explain)?;
    if v.ok {
        println!("{}", v.line);
        return Ok(ExitCode::SUCCESS);
    }
    eprintln!("the event record does not verify: {}", v.line);
    for d in v.differences.iter().skip(1) {
        eprintln!("  {d}");
    }
    if v.difference_count > v.differences.len() {
        eprintln!(
            "  ... and {} more",
            v.difference_count - v.differences.len()
        );
    }
    Ok(ExitCode::from(1))
}

async fn export(args: ExportArgs) -> anyhow::Result<()> {
    let time = |name: &str, text: &Option<String>| -> anyhow::Result<Option<Timestamp>> {
        text.as_deref()
            .map(|t| Timestamp::parse(t).map_err(|e| anyhow::anyhow!("--{name}: {e}")))
            .transpose()
    };
    let as_of = time("as-of", &args.as_of)?;
    let known_at = time("known-at", &args.known_at)?;
    let store = Store::open_with(&args.db.database_url, args.db.settings()).await?;
    let signer = crate::publish::signing::load_or_create(&store, &args.key.signing_key).await?;
    let publisher = crate::publish::Publisher::new(signer);
    let rendered = publisher.at(&store, as_of, known_at, None).await?;
    let bytes = if args.format == "csv" {
        &rendered.csv
    } else {
        &rendered.json
    };
    use std::io::Write;
    std::io::stdout().write_all(bytes)?;
    Ok(())
}

async fn keys(cmd: KeysCommand) -> anyhow::Result<()> {
    match cmd {
        KeysCommand::Rotate { key, db } => {
            let store = Store::open_with(&db.database_url, db.settings()).await?;
            let signer = crate::publish::signing::rotate(&store, &key.signing_key).await?;
            println!(
                "new signing key {} written to {}; restart every instance with it",
                signer.key_id(),
                key.signing_key.display()
            );
        }
        KeysCommand::List { db } => {
            let store = Store::open_with(&db.database_url, db.settings()).await?;
            println!("key_id\tstatus\tcreated_at\tretired_at\tpublic_key");
            for k in crate::publish::signing::registry(&store).await? {
                println!(
                    "{}\t{}\t{}\t{}\t{}",
                    k.key_id,
                    k.status,
                    k.created_at,
                    k.retired_at.map(|t| t.to_string()).unwrap_or_default(),
                    k.public_key
                );
            }
        }
    }
    Ok(())
}

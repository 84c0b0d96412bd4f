//! The command line. Every flag also reads a `CUTPOINTS_*` environment variable; every
//! subcommand that touches the database takes `--database-url`.

mod audit;
mod classify;
mod commands;
pub mod demo;
mod observations;
mod people;
mod policy;
mod publication;
mod serve;
mod terminal;

use std::process::ExitCode;

use clap::{Args, Parser, Subcommand};

pub const DEFAULT_DATABASE_URL: &str = "sqlite://cutpoints.db";
pub const DEFAULT_BIND: &str = "127.0.0.1:8080";
pub const DEFAULT_SIGNING_KEY: &str = "cutpoints-signing.key";

#[derive(Parser, Debug)]
#[command(
    name = "cutpoints",
    version,
    about = "Agree, sign off and publish the thresholds that decide when a dashboard metric needs action"
)]
pub struct Cli {
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Args, Debug, Clone)]
pub struct DatabaseArgs {
    /// Database to use: sqlite://FILE (created if missing) or postgres://USER@HOST/DB.
    #[arg(long, env = "CUTPOINTS_DATABASE_URL", default_value = DEFAULT_DATABASE_URL)]
    pub database_url: String,
    /// Seconds to wait for the database (a connection, another writer's lock, one
    /// statement) before giving up; the web answers 503 with Retry-After past it.
    #[arg(long, env = "CUTPOINTS_DB_TIMEOUT", default_value = "5", value_parser = parse_seconds)]
    pub db_timeout: std::time::Duration,
}

impl DatabaseArgs {
    pub fn settings(&self) -> crate::ops::StoreSettings {
        crate::ops::StoreSettings {
            timeout: self.db_timeout,
        }
    }

    /// Opens the database, applying the migrations it lacks.
    pub async fn open(&self) -> anyhow::Result<crate::ops::Store> {
        Ok(crate::ops::Store::open_with(&self.database_url, self.settings()).await?)
    }
}

/// A positive number of seconds, fractions allowed (`0.5`).
fn parse_seconds(text: &str) -> Result<std::time::Duration, String> {
    match text.trim().parse::<f64>() {
        Ok(s) if s.is_finite() && s > 0.0 && s <= 3600.0 => {
            Ok(std::time::Duration::from_secs_f64(s))
        }
        _ => Err(format!(
            "{text:?} is not a number of seconds between 0 and 3600"
        )),
    }
}

#[derive(Args, Debug, Clone)]
pub struct SigningKeyArgs {
    /// File holding the Ed25519 key that signs published sets (created, mode 0600, when
    /// missing and no key is registered yet).
    #[arg(long, env = "CUTPOINTS_SIGNING_KEY", default_value = DEFAULT_SIGNING_KEY)]
    pub signing_key: std::path::PathBuf,
}

#[derive(Args, Debug, Clone)]
pub struct ServeArgs {
    #[command(flatten)]
    pub db: DatabaseArgs,
    /// Address and port to listen on.
    #[arg(long, env = "CUTPOINTS_BIND", default_value = DEFAULT_BIND)]
    pub bind: String,
    /// The site is reached over https (via a TLS-terminating proxy): mark cookies Secure and
    /// send Strict-Transport-Security.
    #[arg(long, env = "CUTPOINTS_SECURE_COOKIES")]
    pub secure_cookies: bool,
    /// Header in which a trusted reverse proxy passes the client address (for sign-in
    /// throttling), e.g. X-Forwarded-For. Leave unset when clients connect directly.
    #[arg(long, env = "CUTPOINTS_FORWARDED_HEADER")]
    pub forwarded_header: Option<String>,
    #[command(flatten)]
    pub key: SigningKeyArgs,
    /// Let anyone read the published set, the signing keys and evaluate without a token.
    #[arg(long, env = "CUTPOINTS_PUBLIC_READ")]
    pub public_read: bool,
    /// Threads answering HTTP, each with its own listening socket (0: one per CPU).
    #[arg(long, env = "CUTPOINTS_HTTP_THREADS", default_value_t = 0)]
    pub http_threads: usize,
    /// Do not apply migrations at start-up (the database role may not change the schema);
    /// refuse to start if any are missing. See docs/postgres-app-role.sql.
    #[arg(long, env = "CUTPOINTS_SKIP_MIGRATIONS")]
    pub skip_migrations: bool,
}

#[derive(Args, Debug, Clone)]
pub struct DemoArgs {
    /// Address and port to listen on.
    #[arg(long, env = "CUTPOINTS_BIND", default_value = DEFAULT_BIND)]
    pub bind: String,
    /// An empty database to seed instead of a fresh SQLite file in a temporary folder. The
    /// demo ignores CUTPOINTS_DATABASE_URL so that it never seeds a real database by mistake.
    #[arg(long, env = "CUTPOINTS_DEMO_DATABASE_URL")]
    pub database_url: Option<String>,
}

#[derive(Subcommand, Debug)]
pub enum Command {
    /// Run the web application.
    Serve(ServeArgs),
    /// Run the application on a fresh database seeded with an invented scenario.
    Demo(DemoArgs),
    /// Apply database migrations and exit.
    Migrate(DatabaseArgs),
    /// Manage people.
    #[command(subcommand)]
    User(UserCommand),
    /// Manage API tokens.
    #[command(subcommand)]
    Token(TokenCommand),
    /// Check the event record.
    #[command(subcommand)]
    Audit(AuditCommand),
    /// Print the published set (the same bytes as GET /api/v1/published).
    Export(ExportArgs),
    /// Manage the keys that sign published sets.
    #[command(subcommand)]
    Keys(KeysCommand),
    /// Change the approval policy (recorded in the event record).
    #[command(subcommand)]
    Policy(PolicyCommand),
    /// Manage metrics' history (the evidence for their thresholds).
    #[command(subcommand)]
    Observations(ObservationsCommand),
    /// Classify values against a cut set; prints one JSON object per value per line.
    Classify(classify::ClassifyArgs),
    /// Print the OpenAPI 3.1 description of /api/v1 (as GET /api/v1/openapi.json serves it;
    /// docs/openapi.json is this output).
    Openapi,
}

#[derive(Subcommand, Debug)]
pub enum UserCommand {
    /// Add a person (the first admin too). The password is read from standard input.
    Add {
        #[arg(long, env = "CUTPOINTS_USERNAME")]
        username: String,
        /// One or more of admin, owner, reviewer, signatory, auditor, viewer, comma-separated.
        #[arg(long, env = "CUTPOINTS_ROLE")]
        role: String,
        /// Shown beside every decision the person makes; defaults to the username.
        #[arg(long, env = "CUTPOINTS_DISPLAY_NAME", default_value = "")]
        display_name: String,
        /// Read the password from the first line of standard input.
        #[arg(long, env = "CUTPOINTS_PASSWORD_STDIN", required = true)]
        password_stdin: bool,
        #[command(flatten)]
        db: DatabaseArgs,
    },
    /// List people and their roles.
    List {
        #[command(flatten)]
        db: DatabaseArgs,
    },
    /// Replace a person's roles.
    SetRoles {
        #[arg(long, env = "CUTPOINTS_USERNAME")]
        username: String,
        #[arg(long, env = "CUTPOINTS_ROLE")]
        role: String,
        #[command(flatten)]
        db: DatabaseArgs,
    },
    /// Deactivate a person: their sessions end and their tokens stop working.
    Deactivate {
        #[arg(long, env = "CUTPOINTS_USERNAME")]
        username: String,
        #[command(flatten)]
        db: DatabaseArgs,
    },
    /// Let a deactivated person sign in again.
    Activate {
        #[arg(long, env = "CUTPOINTS_USERNAME")]
        username: String,
        #[command(flatten)]
        db: DatabaseArgs,
    },
    /// Set a new password, read from standard input; the person's sessions end.
    ResetPassword {
        #[arg(long, env = "CUTPOINTS_USERNAME")]
        username: String,
        #[arg(long, env = "CUTPOINTS_PASSWORD_STDIN", required = true)]
        password_stdin: bool,
        #[command(flatten)]
        db: DatabaseArgs,
    },
}

#[derive(Args, Debug, Clone)]
pub struct ExportArgs {
    /// The set in force at this time (valid time); default now.
    #[arg(long, env = "CUTPOINTS_AS_OF")]
    pub as_of: Option<String>,
    /// As the register had recorded it by this time (transaction time); default now.
    #[arg(long, env = "CUTPOINTS_KNOWN_AT")]
    pub known_at: Option<String>,
    #[arg(long, env = "CUTPOINTS_FORMAT", default_value = "json", value_parser = ["json", "csv"])]
    pub format: String,
    #[command(flatten)]
    pub key: SigningKeyArgs,
    #[command(flatten)]
    pub db: DatabaseArgs,
}

#[derive(Subcommand, Debug)]
pub enum KeysCommand {
    /// Make a new signing key, write it over the key file, register it as current and retire
    /// the old one (still listed, so sets it signed stay verifiable). Restart every instance
    /// with the new key file afterwards.
    Rotate {
        #[command(flatten)]
        key: SigningKeyArgs,
        #[command(flatten)]
        db: DatabaseArgs,
    },
    /// List the registered public keys.
    List {
        #[command(flatten)]
        db: DatabaseArgs,
    },
}

#[derive(Subcommand, Debug)]
pub enum AuditCommand {
    /// The full check: recompute the hash chain from the first event and replay every event
    /// against the audited tables; prints `ok EVENTS HEAD_HASH`, or names the first problem
    /// and exits 1. The run is recorded beside the ones auditors start from the Audit page.
    Verify {
        /// Check everything (what this command always does; the web's quick check goes on
        /// from the last checkpoint instead).
        #[arg(long)]
        full: bool,
        /// A head held from earlier (e.g. a published set's audit_head), as SEQ:HASH; the check
        /// fails if the chain no longer contains it, which reveals a cut and re-forged tail.
        #[arg(long, env = "CUTPOINTS_KNOWN_HEAD")]
        known_head: Option<String>,
        #[command(flatten)]
        db: DatabaseArgs,
    },
}

#[derive(Subcommand, Debug)]
pub enum ObservationsCommand {
    /// Import a metric's history from an RFC 4180 CSV file (period start, value; an optional
    /// header row). Nothing is stored if any line is bad; every bad line is listed.
    Import {
        /// The metric's key.
        #[arg(long, env = "CUTPOINTS_METRIC")]
        metric: String,
        /// merge: add new periods and replace the values of periods already stored;
        /// replace: the file becomes the whole history.
        #[arg(long, env = "CUTPOINTS_MODE", default_value = "merge", value_parser = ["merge", "replace"])]
        mode: String,
        /// Do not draw a progress bar (it is drawn only on a terminal anyway).
        #[arg(long, env = "CUTPOINTS_QUIET")]
        quiet: bool,
        /// The CSV file.
        file: std::path::PathBuf,
        #[command(flatten)]
        db: DatabaseArgs,
    },
}

#[derive(Subcommand, Debug)]
pub enum PolicyCommand {
    /// Set the approval policy; prints the policy in force afterwards.
    Set {
        /// How many current reviewer approvals a proposal needs (1 to 10).
        #[arg(long, env = "CUTPOINTS_REVIEWERS_REQUIRED")]
        reviewers_required: Option<i64>,
        #[command(flatten)]
        db: DatabaseArgs,
    },
    /// Print the approval policy.
    Show {
        #[command(flatten)]
        db: DatabaseArgs,
    },
}

#[derive(Subcommand, Debug)]
pub enum TokenCommand {
    /// Issue a token; prints the token alone on standard output (it is not shown again).
    Issue {
        #[arg(long, env = "CUTPOINTS_USERNAME")]
        username: String,
        /// read: GET requests only; write: whatever the person may do.
        #[arg(long, env = "CUTPOINTS_SCOPE", default_value = "read", value_parser = ["read", "write"])]
        scope: String,
        /// What the token is for.
        #[arg(long, env = "CUTPOINTS_LABEL", default_value = "")]
        label: String,
        /// Days until the token expires; without it the token does not expire.
        #[arg(long, env = "CUTPOINTS_EXPIRES_IN_DAYS", value_parser = clap::value_parser!(i64).range(1..=3650))]
        expires_in_days: Option<i64>,
        #[command(flatten)]
        db: DatabaseArgs,
    },
    /// List tokens (never their secrets).
    List {
        /// Only this person's tokens.
        #[arg(long, env = "CUTPOINTS_USERNAME")]
        username: Option<String>,
        #[command(flatten)]
        db: DatabaseArgs,
    },
    /// Revoke a token by its id (see `token list`).
    Revoke {
        #[arg(long, env = "CUTPOINTS_TOKEN_ID")]
        id: i64,
        #[command(flatten)]
        db: DatabaseArgs,
    },
}

/// Parses the command line and runs it; the exit code is 0 on success, 2 for bad input on
/// the command line, 1 for anything else that failed.
pub fn run() -> ExitCode {
    let cli = Cli::parse();
    if let Command::Classify(args) = &cli.command {
        return classify::run(args);
    }
    if let Command::Openapi = &cli.command {
        print!("{}", crate::web::api::openapi::document_text());
        return ExitCode::SUCCESS;
    }
    init_logging(matches!(cli.command, Command::Serve(_) | Command::Demo(_)));
    let runtime = match tokio::runtime::Builder::new_multi_thread()
        .enable_all()
        .build()
    {
        Ok(rt) => rt,
        Err(e) => {
            eprintln!("error: cannot start the async runtime: {e}");
            return ExitCode::FAILURE;
        }
    };
    match runtime.block_on(commands::run(cli.command)) {
        Ok(code) => code,
        Err(e) => {
            eprintln!("error: {e:#}");
            ExitCode::FAILURE
        }
    }
}

fn init_logging(server: bool) {
    use tracing_subscriber::EnvFilter;
    let default = if server { "info" } else { "warn" };
    let filter =
        EnvFilter::try_from_env("CUTPOINTS_LOG").unwrap_or_else(|_| EnvFilter::new(default));
    let _ = tracing_subscriber::fmt()
        .with_env_filter(filter)
        .with_writer(std::io::stderr)
        .try_init();
}

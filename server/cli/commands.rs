//! Which function runs each subcommand that talks to the database or serves the web
//! application.

use std::process::ExitCode;

use super::Command;
use super::audit::audit;
use super::demo::demo;
use super::observations::observations;
use super::people::{token, user};
use super::policy::policy;
use super::publication::{export, keys};
use super::serve::serve;
use crate::ops::Store;

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

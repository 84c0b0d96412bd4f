//! `policy`: the workflow settings (how many reviewers must approve), set and shown.

use super::PolicyCommand;
use super::terminal::explain;
use crate::ops::users::By;

pub(super) async fn policy(cmd: PolicyCommand) -> anyhow::Result<()> {
    let (db, reviewers_required) = match cmd {
        PolicyCommand::Set {
            reviewers_required,
            db,
        } => (db, reviewers_required),
        PolicyCommand::Show { db } => (db, None),
    };
    let store = db.open().await?;
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

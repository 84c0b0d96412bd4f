//! `user` and `token`: adding people, their roles, activation and passwords, and their API
//! tokens.

use super::terminal::{explain, read_password};
use super::{DatabaseArgs, TokenCommand, UserCommand};
use crate::domain::Timestamp;
use crate::domain::access::Scope;
use crate::ops::users::{self as user_ops, By, NewUser};

pub(super) async fn user(cmd: UserCommand) -> anyhow::Result<()> {
    match cmd {
        UserCommand::Add {
            username,
            role,
            display_name,
            password_stdin: _,
            db,
        } => {
            let password = read_password()?;
            let store = db.open().await?;
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
            let store = db.open().await?;
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
            let store = db.open().await?;
            let user = user_ops::set_roles(&store, By::Operator, &username, &role)
                .await
                .map_err(explain)?;
            println!("{} now has roles {}", user.username, user.roles.to_list());
        }
        UserCommand::Deactivate { username, db } => set_active(&username, db, false).await?,
        UserCommand::Activate { username, db } => set_active(&username, db, true).await?,
        UserCommand::ResetPassword {
            username,
            password_stdin: _,
            db,
        } => {
            let password = read_password()?;
            let store = db.open().await?;
            user_ops::reset_password(&store, By::Operator, &username, &password)
                .await
                .map_err(explain)?;
            println!("reset the password of {username}; their sessions ended");
        }
    }
    Ok(())
}

/// `user activate` and `user deactivate`.
async fn set_active(username: &str, db: DatabaseArgs, active: bool) -> anyhow::Result<()> {
    let store = db.open().await?;
    user_ops::set_active(&store, By::Operator, username, active)
        .await
        .map_err(explain)?;
    let done = if active { "activated" } else { "deactivated" };
    println!("{done} {username}");
    Ok(())
}

pub(super) async fn token(cmd: TokenCommand) -> anyhow::Result<()> {
    match cmd {
        TokenCommand::Issue {
            username,
            scope,
            label,
            expires_in_days,
            db,
        } => {
            let scope = Scope::parse(&scope).map_err(anyhow::Error::msg)?;
            let store = db.open().await?;
            let expires_at = expires_in_days.map(|d| Timestamp::now().plus_seconds(d * 86_400));
            let (secret, _) =
                user_ops::issue_token(&store, By::Operator, &username, scope, &label, expires_at)
                    .await
                    .map_err(explain)?;
            println!("{secret}");
        }
        TokenCommand::List { username, db } => {
            let store = db.open().await?;
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
            let store = db.open().await?;
            let t = user_ops::revoke_token(&store, By::Operator, id)
                .await
                .map_err(explain)?;
            println!("revoked token {} ({}) of {}", t.id, t.prefix, t.username);
        }
    }
    Ok(())
}

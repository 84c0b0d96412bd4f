//! The API token pages: every token, the form that issues one, and revoking one.

use axum::extract::{Path, State};
use axum::http::StatusCode;
use axum::response::{IntoResponse, Response};
use serde_json::json;

use super::{form_problems, require_admin};
use crate::domain::access::{Scope, Session};
use crate::domain::{Problems, Timestamp};
use crate::ops::OpError;
use crate::ops::users::{self as user_ops, By};
use crate::web::AppState;
use crate::web::auth::PageSession;
use crate::web::error::{ApiError, PageError};
use crate::web::pages::{FormFields, base_context, field_errors, render};
use crate::web::redirect::to_same_site;

fn tokens_page(
    session: &Session,
    all: &[crate::domain::access::TokenInfo],
    people: &[crate::domain::User],
    issued: Option<(&str, &crate::domain::access::TokenInfo)>,
    form: Option<&FormFields>,
    problems: &Problems,
    status: StatusCode,
) -> Response {
    let now = Timestamp::now();
    let mut ctx = base_context(Some(session), "API tokens", "tokens");
    ctx.insert(
        "tokens",
        &all.iter()
            .map(|t| json!({"info": t, "usable": t.is_usable(now)}))
            .collect::<Vec<_>>(),
    );
    ctx.insert(
        "people",
        &people
            .iter()
            .filter(|p| p.active)
            .map(|p| json!({"username": p.username, "display_name": p.display_name}))
            .collect::<Vec<_>>(),
    );
    ctx.insert(
        "issued",
        &issued.map(|(secret, info)| json!({"secret": secret, "info": info})),
    );
    let get = |name: &str| form.map(|f| f.get(name).to_string()).unwrap_or_default();
    ctx.insert(
        "values",
        &json!({"username": get("username"), "scope": get("scope"), "label": get("label"), "expires_in_days": get("expires_in_days")}),
    );
    ctx.insert("errors", &field_errors(problems));
    render(status, "admin_tokens.html", &ctx)
}

pub async fn tokens_list(
    State(state): State<AppState>,
    PageSession(session): PageSession,
) -> Result<Response, PageError> {
    require_admin(&session)?;
    let all = user_ops::list_tokens(&state.store, By::Person(&session.user), None).await?;
    let people = user_ops::list(&state.store).await?;
    Ok(tokens_page(
        &session,
        &all,
        &people,
        None,
        None,
        &Problems::default(),
        StatusCode::OK,
    ))
}

/// Reads "expires in N days": blank means never.
fn expiry_field(text: &str, problems: &mut Problems) -> Option<Timestamp> {
    let text = text.trim();
    if text.is_empty() {
        return None;
    }
    match text.parse::<i64>() {
        Ok(days) if (1..=3650).contains(&days) => {
            Some(Timestamp::now().plus_seconds(days * 86_400))
        }
        _ => {
            problems.add(
                "expires_in_days",
                "expires_in_days must be a whole number of days from 1 to 3650, or blank for no expiry",
            );
            None
        }
    }
}

pub async fn token_issue(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    form: FormFields,
) -> Result<Response, PageError> {
    require_admin(&session)?;
    let mut problems = Problems::default();
    let scope = match Scope::parse(form.get("scope")) {
        Ok(s) => Some(s),
        Err(m) => {
            problems.add("scope", m);
            None
        }
    };
    let expires_at = expiry_field(form.get("expires_in_days"), &mut problems);
    let result = match scope {
        Some(scope) if problems.is_empty() => user_ops::issue_token(
            &state.store,
            By::Person(&session.user),
            form.get("username"),
            scope,
            form.get("label"),
            expires_at,
        )
        .await
        .map_err(|e| match e {
            OpError::NotFound(m) => {
                let mut p = Problems::default();
                p.add("username", m);
                OpError::Invalid(p)
            }
            other => other,
        }),
        _ => Err(OpError::Invalid(problems)),
    };
    let people = user_ops::list(&state.store).await?;
    match result {
        Ok((secret, info)) => {
            let listed =
                user_ops::list_tokens(&state.store, By::Person(&session.user), None).await?;
            Ok(tokens_page(
                &session,
                &listed,
                &people,
                Some((&secret, &info)),
                None,
                &Problems::default(),
                StatusCode::CREATED,
            ))
        }
        Err(e) => {
            let (p, status) = form_problems(e, "label")?;
            let listed =
                user_ops::list_tokens(&state.store, By::Person(&session.user), None).await?;
            Ok(tokens_page(
                &session,
                &listed,
                &people,
                None,
                Some(&form),
                &p,
                status,
            ))
        }
    }
}

pub async fn token_revoke(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    Path(id): Path<String>,
    form: FormFields,
) -> Result<Response, PageError> {
    require_admin(&session)?;
    let id: i64 = id
        .parse()
        .map_err(|_| PageError(ApiError::not_found(format!("no token with id {id:?}"))))?;
    user_ops::revoke_token(&state.store, By::Person(&session.user), id).await?;
    state.tokens.clear();
    let back = Some(form.get("back")).filter(|b| b.starts_with("/admin/"));
    Ok(to_same_site(back.unwrap_or(""), "/admin/tokens").into_response())
}

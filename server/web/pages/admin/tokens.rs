//! The API token pages: every token, the form that issues one, and revoking one.

use std::collections::BTreeMap;

use axum::extract::Path;
use axum::http::StatusCode;
use axum::response::{IntoResponse, Response};
use serde::Serialize;

use super::{AsAdmin, TokenRow, token_rows};
use crate::domain::access::{Scope, Session, TokenInfo};
use crate::domain::{Problems, Timestamp, User, Username};
use crate::ops::OpError;
use crate::ops::users as user_ops;
use crate::web::error::{ApiError, PageError};
use crate::web::pages::{Common, FormFields, PageData, field_errors, form_problems, render};
use crate::web::redirect::to_same_site;

/// A person a token can be issued to.
#[derive(Debug, Serialize)]
pub struct TokenHolder<'a> {
    pub username: &'a Username,
    pub display_name: &'a str,
}

/// A token just issued: its secret, shown this once, and its details.
#[derive(Debug, Serialize)]
pub struct IssuedToken<'a> {
    pub secret: &'a str,
    pub info: &'a TokenInfo,
}

/// The text fields of the form that issues a token, as typed.
#[derive(Debug, Serialize)]
pub struct TokenFormValues {
    pub username: String,
    pub scope: String,
    pub label: String,
    pub expires_in_days: String,
}

/// Every token, the form that issues one (with the people it can be for), and the token just
/// issued, if one was.
#[derive(Debug, Serialize)]
pub struct TokensPage<'a> {
    pub tokens: Vec<TokenRow<'a>>,
    /// The active people.
    pub people: Vec<TokenHolder<'a>>,
    pub issued: Option<IssuedToken<'a>>,
    pub values: TokenFormValues,
    pub errors: BTreeMap<String, String>,
}

impl PageData for TokensPage<'_> {
    const TEMPLATE: &'static str = "admin_tokens.html";
}

fn tokens_page(
    session: &Session,
    all: &[TokenInfo],
    people: &[User],
    issued: Option<(&str, &TokenInfo)>,
    form: Option<&FormFields>,
    problems: &Problems,
    status: StatusCode,
) -> Response {
    let get = |name: &str| form.map(|f| f.get(name).to_string()).unwrap_or_default();
    let data = TokensPage {
        tokens: token_rows(all),
        people: people
            .iter()
            .filter(|p| p.active)
            .map(|p| TokenHolder {
                username: &p.username,
                display_name: &p.display_name,
            })
            .collect(),
        issued: issued.map(|(secret, info)| IssuedToken { secret, info }),
        values: TokenFormValues {
            username: get("username"),
            scope: get("scope"),
            label: get("label"),
            expires_in_days: get("expires_in_days"),
        },
        errors: field_errors(problems),
    };
    render(
        status,
        &Common::new(Some(session), "API tokens", "tokens"),
        &data,
    )
}

pub async fn tokens_list(admin: AsAdmin<()>) -> Result<Response, PageError> {
    let store = &admin.state.store;
    let all = user_ops::list_tokens(store, admin.by(), None).await?;
    let people = user_ops::list(store).await?;
    Ok(tokens_page(
        &admin.session,
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

pub async fn token_issue(admin: AsAdmin<FormFields>) -> Result<Response, PageError> {
    let (store, form) = (&admin.state.store, &admin.input);
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
            store,
            admin.by(),
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
    let people = user_ops::list(store).await?;
    let (issued, typed, problems, status) = match result {
        Ok(issued) => (Some(issued), None, Problems::default(), StatusCode::CREATED),
        Err(e) => {
            let (p, status) = form_problems(e, "label")?;
            (None, Some(form), p, status)
        }
    };
    let listed = user_ops::list_tokens(store, admin.by(), None).await?;
    Ok(tokens_page(
        &admin.session,
        &listed,
        &people,
        issued
            .as_ref()
            .map(|(secret, info)| (secret.as_str(), info)),
        typed,
        &problems,
        status,
    ))
}

pub async fn token_revoke(
    admin: AsAdmin<(Path<String>, FormFields)>,
) -> Result<Response, PageError> {
    let (Path(id), form) = &admin.input;
    let id: i64 = id
        .parse()
        .map_err(|_| PageError(ApiError::not_found(format!("no token with id {id:?}"))))?;
    user_ops::revoke_token(&admin.state.store, admin.by(), id).await?;
    admin.state.tokens.clear();
    let back = Some(form.get("back")).filter(|b| b.starts_with("/admin/"));
    Ok(to_same_site(back.unwrap_or(""), "/admin/tokens").into_response())
}

//! Admin pages: people (add, roles, display name, activation, password reset) and, in
//! [`tokens`], API tokens (issue, list, revoke).

mod tokens;

pub use tokens::{
    IssuedToken, TokenFormValues, TokenHolder, TokensPage, token_issue, token_revoke, tokens_list,
};

use std::collections::BTreeMap;

use axum::extract::{FromRequestParts, Path, State};
use axum::http::StatusCode;
use axum::http::request::Parts;
use axum::response::{IntoResponse, Redirect, Response};
use serde::Serialize;

use super::{Common, FormFields, PageData, PageQuery, field_errors, form_problems, page, render};
use crate::domain::access::{Session, TokenInfo};
use crate::domain::{FieldProblem, Problems, User};
use crate::domain::{Role, Timestamp, Username};
use crate::ops::OpError;
use crate::ops::users::{self as user_ops, By, NewUser};
use crate::web::AppState;
use crate::web::auth::PageSession;
use crate::web::error::{ApiError, PageError};

fn require_admin(session: &Session) -> Result<(), PageError> {
    if session.user.roles.has(Role::Admin) {
        Ok(())
    } else {
        Err(PageError(ApiError::forbidden(
            "only an admin may manage people and tokens",
        )))
    }
}

/// The person an admin page's address names; a text that is no username names nobody (404)
/// and never reaches the database.
pub struct PersonPath(String);

impl FromRequestParts<AppState> for PersonPath {
    type Rejection = PageError;

    async fn from_request_parts(parts: &mut Parts, state: &AppState) -> Result<Self, PageError> {
        let Path(text) = Path::<String>::from_request_parts(parts, state)
            .await
            .map_err(|e| PageError(ApiError::bad_request(e.body_text())))?;
        Username::parse(&text)
            .map(|u| PersonPath(u.as_str().to_string()))
            .map_err(|_| PageError(ApiError::not_found(format!("no person named {text:?}"))))
    }
}

fn all_roles() -> Vec<&'static str> {
    Role::ALL.iter().map(|r| r.as_str()).collect()
}

/// Everyone with an account.
#[derive(Debug, Serialize)]
pub struct PeoplePage<'a> {
    pub people: &'a [User],
}

impl PageData for PeoplePage<'_> {
    const TEMPLATE: &'static str = "admin_users.html";
}

pub async fn users_list(
    State(state): State<AppState>,
    PageSession(session): PageSession,
) -> Result<Response, PageError> {
    require_admin(&session)?;
    let people = user_ops::list(&state.store).await?;
    let common = Common::new(Some(&session), "People", "people");
    Ok(page(&common, &PeoplePage { people: &people }))
}

/// The text fields of the form that adds a person, as typed.
#[derive(Debug, Serialize)]
pub struct NewPersonValues {
    pub username: String,
    pub display_name: String,
}

/// The form that adds a person: the fields as typed, the roles to choose from and those
/// ticked, and the problems of the last try.
#[derive(Debug, Serialize)]
pub struct NewPersonForm<'a> {
    pub values: NewPersonValues,
    pub roles: Vec<&'static str>,
    pub checked: Vec<String>,
    pub errors: BTreeMap<String, String>,
    pub problems: &'a [FieldProblem],
}

impl PageData for NewPersonForm<'_> {
    const TEMPLATE: &'static str = "admin_user_new.html";
}

fn new_user_form(
    session: &Session,
    form: Option<&FormFields>,
    problems: &Problems,
    status: StatusCode,
) -> Response {
    let get = |name: &str| form.map(|f| f.get(name).to_string()).unwrap_or_default();
    let checked: Vec<String> = form
        .map(|f| f.all("role").into_iter().map(str::to_string).collect())
        .unwrap_or_default();
    let data = NewPersonForm {
        values: NewPersonValues {
            username: get("username"),
            display_name: get("display_name"),
        },
        roles: all_roles(),
        checked,
        errors: field_errors(problems),
        problems: &problems.0,
    };
    render(
        status,
        &Common::new(Some(session), "Add a person", "people"),
        &data,
    )
}

pub async fn user_new_form(PageSession(session): PageSession) -> Result<Response, PageError> {
    require_admin(&session)?;
    Ok(new_user_form(
        &session,
        None,
        &Problems::default(),
        StatusCode::OK,
    ))
}

pub async fn user_create(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    form: FormFields,
) -> Result<Response, PageError> {
    require_admin(&session)?;
    let input = NewUser {
        username: form.get("username").to_string(),
        display_name: form.get("display_name").to_string(),
        roles: form.all("role").join(","),
        password: form.get("password").to_string(),
    };
    match user_ops::add(&state.store, By::Person(&session.user), &input).await {
        Ok(u) => {
            Ok(Redirect::to(&format!("/admin/users/{}?saved=added", u.username)).into_response())
        }
        Err(e) => {
            let (p, status) = form_problems(e, "username")?;
            Ok(new_user_form(&session, Some(&form), &p, status))
        }
    }
}

/// A token as the lists show it, with whether it can be used now.
#[derive(Debug, Serialize)]
pub struct TokenRow<'a> {
    pub info: &'a TokenInfo,
    pub usable: bool,
}

fn token_rows(tokens: &[TokenInfo]) -> Vec<TokenRow<'_>> {
    let now = Timestamp::now();
    tokens
        .iter()
        .map(|info| TokenRow {
            info,
            usable: info.is_usable(now),
        })
        .collect()
}

/// A person's page: their details and roles, their tokens, and the forms to change them.
#[derive(Debug, Serialize)]
pub struct PersonPage<'a> {
    pub person: &'a User,
    pub person_roles: Vec<&'static str>,
    /// Every role, to choose from.
    pub roles: Vec<&'static str>,
    pub tokens: Vec<TokenRow<'a>>,
    pub notice: Option<&'a str>,
    pub errors: BTreeMap<String, String>,
    /// The admin is looking at their own page (and may not deactivate themselves).
    pub is_me: bool,
}

impl PageData for PersonPage<'_> {
    const TEMPLATE: &'static str = "admin_user.html";
}

fn user_page(
    session: &Session,
    person: &User,
    person_tokens: &[TokenInfo],
    notice: Option<&str>,
    problems: &Problems,
    status: StatusCode,
) -> Response {
    let data = PersonPage {
        person,
        person_roles: person.roles.iter().map(Role::as_str).collect(),
        roles: all_roles(),
        tokens: token_rows(person_tokens),
        notice,
        errors: field_errors(problems),
        is_me: session.user.username == person.username,
    };
    let common = Common::new(Some(session), person.display_name.as_str(), "people");
    render(status, &common, &data)
}

#[derive(serde::Deserialize, Default)]
#[serde(default)]
pub struct SavedQuery {
    saved: String,
}

pub async fn user_detail(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    PersonPath(username): PersonPath,
    PageQuery(query): PageQuery<SavedQuery>,
) -> Result<Response, PageError> {
    require_admin(&session)?;
    let person = user_ops::get(&state.store, &username).await?;
    let person_tokens =
        user_ops::list_tokens(&state.store, By::Person(&session.user), Some(&username)).await?;
    let notice = match query.saved.as_str() {
        "added" => Some("The person was added. They can sign in now."),
        "details" => Some("Display name and roles saved."),
        "activated" => Some("The person can sign in again."),
        "deactivated" => Some(
            "The person was deactivated: their sessions ended and their tokens stopped working.",
        ),
        "password" => Some("The password was reset and their sessions ended."),
        _ => None,
    };
    Ok(user_page(
        &session,
        &person,
        &person_tokens,
        notice,
        &Problems::default(),
        StatusCode::OK,
    ))
}

async fn reshow_user(
    state: &AppState,
    session: &Session,
    username: &str,
    err: OpError,
) -> Result<Response, PageError> {
    let (p, status) = form_problems(err, "roles")?;
    let person = user_ops::get(&state.store, username).await?;
    let person_tokens =
        user_ops::list_tokens(&state.store, By::Person(&session.user), Some(username)).await?;
    Ok(user_page(
        session,
        &person,
        &person_tokens,
        None,
        &p,
        status,
    ))
}

pub async fn user_update(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    PersonPath(username): PersonPath,
    form: FormFields,
) -> Result<Response, PageError> {
    require_admin(&session)?;
    let by = By::Person(&session.user);
    let result = async {
        user_ops::set_display_name(&state.store, by, &username, form.get("display_name")).await?;
        user_ops::set_roles(&state.store, by, &username, &form.all("role").join(",")).await
    }
    .await;
    match result {
        Ok(_) => {
            Ok(Redirect::to(&format!("/admin/users/{username}?saved=details")).into_response())
        }
        Err(e) => reshow_user(&state, &session, &username, e).await,
    }
}

pub async fn user_active(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    PersonPath(username): PersonPath,
    form: FormFields,
) -> Result<Response, PageError> {
    require_admin(&session)?;
    let active = form.get("active") == "1";
    user_ops::set_active(&state.store, By::Person(&session.user), &username, active).await?;
    state.tokens.clear();
    let saved = if active { "activated" } else { "deactivated" };
    Ok(Redirect::to(&format!("/admin/users/{username}?saved={saved}")).into_response())
}

pub async fn user_password(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    PersonPath(username): PersonPath,
    form: FormFields,
) -> Result<Response, PageError> {
    require_admin(&session)?;
    let result = if form.get("password") != form.get("password_again") {
        let mut p = Problems::default();
        p.add("password", "the two passwords differ");
        Err(OpError::Invalid(p))
    } else {
        user_ops::reset_password(
            &state.store,
            By::Person(&session.user),
            &username,
            form.get("password"),
        )
        .await
    };
    match result {
        Ok(_) => {
            Ok(Redirect::to(&format!("/admin/users/{username}?saved=password")).into_response())
        }
        Err(e) => reshow_user(&state, &session, &username, e).await,
    }
}

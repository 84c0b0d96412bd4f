//! Admin pages: people (add, roles, display name, activation, password reset) and, in
//! [`tokens`], API tokens (issue, list, revoke).

mod tokens;

pub use tokens::{
    IssuedToken, TokenFormValues, TokenHolder, TokensPage, token_issue, token_revoke, tokens_list,
};

use std::collections::BTreeMap;

use axum::extract::{FromRequest, FromRequestParts, Path, Request};
use axum::http::StatusCode;
use axum::http::request::Parts;
use axum::response::{IntoResponse, Redirect, Response};
use serde::Serialize;

use super::{
    Common, FormFields, PageData, PageQuery, field_errors, form_problems, page, render,
    require_admin,
};
use crate::domain::access::{Session, TokenInfo};
use crate::domain::{FieldProblem, Problems, User};
use crate::domain::{Role, Timestamp, Username};
use crate::ops::OpError;
use crate::ops::users::{self as user_ops, By, NewUser};
use crate::web::AppState;
use crate::web::auth::PageSession;
use crate::web::error::{ApiError, PageError};

/// A request only an admin may make: the state, the session and the rest of the request as
/// `Input`, read in that order; whether the session is an admin's is checked last.
pub struct AsAdmin<Input> {
    state: AppState,
    session: Session,
    input: Input,
}

impl<Input, M> FromRequest<AppState, M> for AsAdmin<Input>
where
    Input: FromRequest<AppState, M>,
    Input::Rejection: IntoResponse,
{
    type Rejection = Response;

    async fn from_request(req: Request, state: &AppState) -> Result<Self, Response> {
        let (mut parts, body) = req.into_parts();
        let PageSession(session) = PageSession::from_request_parts(&mut parts, state).await?;
        let input = Input::from_request(Request::from_parts(parts, body), state)
            .await
            .map_err(IntoResponse::into_response)?;
        require_admin(&session, "manage people and tokens").map_err(IntoResponse::into_response)?;
        Ok(AsAdmin {
            state: state.clone(),
            session,
            input,
        })
    }
}

impl<Input> AsAdmin<Input> {
    fn by(&self) -> By<'_> {
        By::Person(&self.session.user)
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

pub async fn users_list(admin: AsAdmin<()>) -> Result<Response, PageError> {
    let people = user_ops::list(&admin.state.store).await?;
    let common = Common::new(Some(&admin.session), "People", "people");
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

pub async fn user_new_form(admin: AsAdmin<()>) -> Result<Response, PageError> {
    Ok(new_user_form(
        &admin.session,
        None,
        &Problems::default(),
        StatusCode::OK,
    ))
}

pub async fn user_create(admin: AsAdmin<FormFields>) -> Result<Response, PageError> {
    let form = &admin.input;
    let input = NewUser {
        username: form.get("username").to_string(),
        display_name: form.get("display_name").to_string(),
        roles: form.all("role").join(","),
        password: form.get("password").to_string(),
    };
    match user_ops::add(&admin.state.store, admin.by(), &input).await {
        Ok(u) => {
            Ok(Redirect::to(&format!("/admin/users/{}?saved=added", u.username)).into_response())
        }
        Err(e) => {
            let (p, status) = form_problems(e, "username")?;
            Ok(new_user_form(&admin.session, Some(form), &p, status))
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

/// An admin's request about one person: the person the address names, and the rest of the
/// request as `Input` (the query, a form).
pub struct OnPerson<Input> {
    state: AppState,
    session: Session,
    username: String,
    input: Input,
}

impl<Input, M> FromRequest<AppState, M> for OnPerson<Input>
where
    (PersonPath, Input): FromRequest<AppState, M>,
    <(PersonPath, Input) as FromRequest<AppState, M>>::Rejection: IntoResponse,
{
    type Rejection = Response;

    async fn from_request(req: Request, state: &AppState) -> Result<Self, Response> {
        let AsAdmin {
            state,
            session,
            input: (PersonPath(username), input),
        } = AsAdmin::from_request(req, state).await?;
        Ok(OnPerson {
            state,
            session,
            username,
            input,
        })
    }
}

impl<Input> OnPerson<Input> {
    fn by(&self) -> By<'_> {
        By::Person(&self.session.user)
    }

    /// The person's page, with a notice or a form's problems.
    async fn show(
        &self,
        notice: Option<&str>,
        problems: &Problems,
        status: StatusCode,
    ) -> Result<Response, PageError> {
        let store = &self.state.store;
        let person = user_ops::get(store, &self.username).await?;
        let person_tokens = user_ops::list_tokens(store, self.by(), Some(&self.username)).await?;
        Ok(user_page(
            &self.session,
            &person,
            &person_tokens,
            notice,
            problems,
            status,
        ))
    }

    /// After a change: back to the person's page saying what was `saved`, or the page again
    /// with the form's problems.
    async fn after<T>(
        &self,
        result: Result<T, OpError>,
        saved: &str,
    ) -> Result<Response, PageError> {
        match result {
            Ok(_) => {
                let to = format!("/admin/users/{}?saved={saved}", self.username);
                Ok(Redirect::to(&to).into_response())
            }
            Err(e) => {
                let (p, status) = form_problems(e, "roles")?;
                self.show(None, &p, status).await
            }
        }
    }
}

pub async fn user_detail(on: OnPerson<PageQuery<SavedQuery>>) -> Result<Response, PageError> {
    let notice = match on.input.0.saved.as_str() {
        "added" => Some("The person was added. They can sign in now."),
        "details" => Some("Display name and roles saved."),
        "activated" => Some("The person can sign in again."),
        "deactivated" => Some(
            "The person was deactivated: their sessions ended and their tokens stopped working.",
        ),
        "password" => Some("The password was reset and their sessions ended."),
        _ => None,
    };
    on.show(notice, &Problems::default(), StatusCode::OK).await
}

pub async fn user_update(on: OnPerson<FormFields>) -> Result<Response, PageError> {
    let (store, by, username, form) = (&on.state.store, on.by(), &on.username, &on.input);
    let result = async {
        user_ops::set_display_name(store, by, username, form.get("display_name")).await?;
        user_ops::set_roles(store, by, username, &form.all("role").join(",")).await
    }
    .await;
    on.after(result, "details").await
}

pub async fn user_active(on: OnPerson<FormFields>) -> Result<Response, PageError> {
    let active = on.input.get("active") == "1";
    user_ops::set_active(&on.state.store, on.by(), &on.username, active).await?;
    on.state.tokens.clear();
    let saved = if active { "activated" } else { "deactivated" };
    on.after(Ok(()), saved).await
}

pub async fn user_password(on: OnPerson<FormFields>) -> Result<Response, PageError> {
    let form = &on.input;
    let result = if form.get("password") != form.get("password_again") {
        Err(OpError::Invalid(Problems::single(
            "password",
            "the two passwords differ",
        )))
    } else {
        user_ops::reset_password(&on.state.store, on.by(), &on.username, form.get("password")).await
    };
    on.after(result, "password").await
}

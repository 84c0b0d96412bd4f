//! Reading result rows into records: running a query into records with a reader of one row,
//! and the readers of values several tables share (a user, a person joined from `users`, and a
//! threshold content, whose cut set and shades are also bound here as they are written).

use sqlx::any::{AnyArguments, AnyRow};
use sqlx::query::Query;
use sqlx::{Any, FromRow, Row};

use super::{Db, StoreError, StoreResult};
use crate::domain::proposal::ThresholdContent;
use crate::domain::thresholds::{CutSet, Direction, Shades};
use crate::domain::{Person, Roles, Timestamp, User, Username};

/// The record of the row `query` finds, if any, read by `read`.
pub(super) async fn optional<T>(
    conn: &mut Db,
    query: Query<'_, Any, AnyArguments>,
    read: impl Fn(&AnyRow) -> StoreResult<T>,
) -> StoreResult<Option<T>> {
    let row = query.fetch_optional(&mut *conn).await?;
    row.as_ref().map(read).transpose()
}

/// A record read by its `FromRow` derive: the `read` of [`optional`] and [`all`] for records
/// whose columns are named as their fields.
pub(super) fn record<T: for<'r> FromRow<'r, AnyRow>>(row: &AnyRow) -> StoreResult<T> {
    Ok(T::from_row(row)?)
}

/// The records of every row `query` finds, in order, each read by `read`.
pub(super) async fn all<T>(
    conn: &mut Db,
    query: Query<'_, Any, AnyArguments>,
    read: impl Fn(&AnyRow) -> StoreResult<T>,
) -> StoreResult<Vec<T>> {
    let rows = query.fetch_all(&mut *conn).await?;
    rows.iter().map(read).collect()
}

/// A user from a row of `users` columns under their own names: `id`, `username`,
/// `display_name`, `roles`, `active` and `created_at`.
pub(super) fn user(row: &AnyRow) -> StoreResult<User> {
    let roles: String = row.try_get("roles")?;
    let active: i64 = row.try_get("active")?;
    Ok(User {
        id: row.try_get("id")?,
        username: row.try_get("username")?,
        display_name: row.try_get("display_name")?,
        roles: Roles::parse_list(&roles).unwrap_or_default(),
        active: active != 0,
        created_at: row.try_get("created_at")?,
    })
}

/// The columns of a `users` row joined under the prefix `a` ([`person_columns`]`!(alias, "a")`),
/// read into a [`Person`] by a record's `#[sqlx(flatten, try_from = "PersonColumns")]` field.
#[derive(FromRow)]
pub struct PersonColumns {
    #[sqlx(rename = "a_id")]
    id: i64,
    #[sqlx(rename = "a_username")]
    username: Username,
    #[sqlx(rename = "a_display_name")]
    display_name: String,
    #[sqlx(rename = "a_active")]
    active: i64,
    #[sqlx(rename = "a_roles")]
    roles: String,
}

impl From<PersonColumns> for Person {
    fn from(c: PersonColumns) -> Person {
        Person {
            id: c.id,
            username: c.username,
            display_name: c.display_name,
            active: c.active != 0,
            roles: Roles::parse_list(&c.roles).unwrap_or_default(),
        }
    }
}

/// The columns of a `users` row joined as `$alias`, named `$p_id`, `$p_username` and so on, as
/// [`PersonColumns`] reads them under the prefix `a`.
macro_rules! person_columns {
    ($alias:literal, $p:literal) => {
        concat!(
            $alias,
            ".id AS ",
            $p,
            "_id, ",
            $alias,
            ".username AS ",
            $p,
            "_username, ",
            $alias,
            ".display_name AS ",
            $p,
            "_display_name, ",
            $alias,
            ".active AS ",
            $p,
            "_active, ",
            $alias,
            ".roles AS ",
            $p,
            "_roles"
        )
    };
}
pub(super) use person_columns;

/// Binds a cut set and its shades to the next parameters of `query`, as the columns
/// [`ContentColumns`] reads: `direction`, `cut_1` to `cut_4`, then `shades`.
pub(super) fn bind_cuts<'q>(
    query: Query<'q, Any, AnyArguments>,
    cuts: &CutSet,
    shades: Shades,
) -> Query<'q, Any, AnyArguments> {
    let [c1, c2, c3, c4] = cuts.values();
    query
        .bind(cuts.direction().as_str())
        .bind(c1)
        .bind(c2)
        .bind(c3)
        .bind(c4)
        .bind(i64::from(shades.get()))
}

/// The cut columns alone (`direction`, `cut_1` to `cut_4`), for reads that need no texts.
#[derive(FromRow)]
pub(super) struct CutColumns {
    direction: String,
    cut_1: f64,
    cut_2: f64,
    cut_3: f64,
    cut_4: f64,
}

impl CutColumns {
    /// Reads them from `row` (stored rows were valid).
    pub(super) fn read(row: &sqlx::any::AnyRow) -> StoreResult<CutSet> {
        let c = CutColumns::from_row(row)?;
        let direction: Direction = c
            .direction
            .parse()
            .map_err(|e| StoreError::Config(format!("stored direction: {e}")))?;
        CutSet::new(direction, [c.cut_1, c.cut_2, c.cut_3, c.cut_4])
            .map_err(|e| StoreError::Config(format!("stored cut set: {e}")))
    }
}

/// The content columns of a revision or version row: `direction`, `cut_1` to `cut_4`, `shades`,
/// `unit`, `effective_from` and `rationale`, read into a [`ThresholdContent`] by a record's
/// `#[sqlx(flatten, try_from = "ContentColumns")]` field (stored rows were valid).
#[derive(FromRow)]
pub struct ContentColumns {
    direction: String,
    cut_1: f64,
    cut_2: f64,
    cut_3: f64,
    cut_4: f64,
    shades: i64,
    unit: String,
    effective_from: Option<Timestamp>,
    rationale: String,
}

impl TryFrom<ContentColumns> for ThresholdContent {
    type Error = StoreError;

    fn try_from(c: ContentColumns) -> StoreResult<ThresholdContent> {
        let direction: Direction = c
            .direction
            .parse()
            .map_err(|e| StoreError::Config(format!("stored direction: {e}")))?;
        let cuts = CutSet::new(direction, [c.cut_1, c.cut_2, c.cut_3, c.cut_4])
            .map_err(|e| StoreError::Config(format!("stored cut set: {e}")))?;
        let shades =
            Shades::new(c.shades).map_err(|e| StoreError::Config(format!("stored shades: {e}")))?;
        Ok(ThresholdContent {
            cuts,
            shades,
            unit: c.unit,
            effective_from: c.effective_from,
            rationale: c.rationale,
        })
    }
}

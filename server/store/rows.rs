//! Reading result rows into records: running a query into records with a reader of one row,
//! and the readers of values several tables share (a user, a person joined from `users`, and a
//! cut set with its shades, which is also bound here as it is written).

use sqlx::any::{AnyArguments, AnyRow};
use sqlx::query::Query;
use sqlx::{Any, Row};

use super::{Db, StoreError, StoreResult};
use crate::domain::thresholds::{CutSet, Direction, Shades};
use crate::domain::{Person, Roles, User};

/// The record of the row `query` finds, if any, read by `read`.
pub(super) async fn optional<T>(
    conn: &mut Db,
    query: Query<'_, Any, AnyArguments>,
    read: impl Fn(&AnyRow) -> StoreResult<T>,
) -> StoreResult<Option<T>> {
    let row = query.fetch_optional(&mut *conn).await?;
    row.as_ref().map(read).transpose()
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

/// A person from the columns of a joined `users` row named `{prefix}_id`, `{prefix}_username`
/// and so on (see [`person_columns`]).
pub(super) fn person(row: &AnyRow, prefix: &str) -> StoreResult<Person> {
    let col = |name: &str| format!("{prefix}_{name}");
    let roles: String = row.try_get(col("roles").as_str())?;
    let active: i64 = row.try_get(col("active").as_str())?;
    Ok(Person {
        id: row.try_get(col("id").as_str())?,
        username: row.try_get(col("username").as_str())?,
        display_name: row.try_get(col("display_name").as_str())?,
        active: active != 0,
        roles: Roles::parse_list(&roles).unwrap_or_default(),
    })
}

/// The columns of a `users` row joined as `$alias`, named `$p_id`, `$p_username` and so on, as
/// [`person`] reads them.
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
/// [`cuts_from_row`] reads: `direction`, `cut_1` to `cut_4`, then `shades`.
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

/// Reads the direction and four cuts of a row into a cut set (stored rows were valid).
pub(super) fn cuts_from_row(row: &AnyRow) -> StoreResult<(CutSet, Shades)> {
    let direction: String = row.try_get("direction")?;
    let direction: Direction = direction
        .parse()
        .map_err(|e| StoreError::Config(format!("stored direction: {e}")))?;
    let cuts = CutSet::new(
        direction,
        [
            row.try_get("cut_1")?,
            row.try_get("cut_2")?,
            row.try_get("cut_3")?,
            row.try_get("cut_4")?,
        ],
    )
    .map_err(|e| StoreError::Config(format!("stored cut set: {e}")))?;
    let shades: i64 = row.try_get("shades")?;
    let shades =
        Shades::new(shades).map_err(|e| StoreError::Config(format!("stored shades: {e}")))?;
    Ok((cuts, shades))
}

//! The metric register: descriptive fields, owners and tags.

use serde::Serialize;
use serde_json::{Map, json};
use sqlx::Row;
use sqlx::any::{Any, AnyRow};
use sqlx::{Encode, Type};

use super::{Actor, Store, StoreError, StoreResult, WriteTx, sql};
use crate::domain::metric::MetricFields;
use crate::domain::{Metric, MetricKey, PersonRef, Problems, Role, Username};

/// A change to some descriptive fields; `None` leaves a field as it is.
#[derive(Clone, Debug, Default)]
pub struct MetricPatch {
    pub name: Option<String>,
    pub description: Option<String>,
    pub unit: Option<String>,
    pub owners: Option<Vec<Username>>,
    pub data_source: Option<String>,
    pub review_cadence_months: Option<Option<i64>>,
    pub tags: Option<Vec<String>>,
}

/// Search terms for the register list.
#[derive(Clone, Debug, Default)]
pub struct MetricFilter {
    /// Matches key, name or a tag, case-insensitively, as a substring.
    pub text: String,
    pub tag: String,
    pub owner: String,
}

/// One page of the register and how many metrics match in all.
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct MetricPage {
    pub metrics: Vec<Metric>,
    pub total: i64,
    pub page: i64,
    pub per_page: i64,
}

fn metric_from_row(row: &AnyRow) -> StoreResult<Metric> {
    Ok(Metric {
        id: row.try_get("id")?,
        key: row.try_get("key")?,
        name: row.try_get("name")?,
        description: row.try_get("description")?,
        unit: row.try_get("unit")?,
        owners: Vec::new(),
        data_source: row.try_get("data_source")?,
        review_cadence_months: row.try_get("review_cadence_months")?,
        tags: Vec::new(),
        created_at: row.try_get("created_at")?,
        updated_at: row.try_get("updated_at")?,
    })
}

macro_rules! select_metrics {
    ($rest:literal) => {
        concat!(
            "SELECT m.id, m.key, m.name, m.description, m.unit, m.data_source, ",
            "m.review_cadence_months, m.created_at, m.updated_at FROM metrics m ",
            $rest
        )
    };
}

/// Fills in owners and tags for metrics already read, with one query each.
async fn attach_owners_and_tags(
    conn: &mut crate::store::Db,
    metrics: &mut [Metric],
) -> StoreResult<()> {
    if metrics.is_empty() {
        return Ok(());
    }
    let placeholders = sql::placeholders(metrics.len());
    let owners_sql = format!(
        "SELECT o.metric_id, u.username, u.display_name FROM metric_owners o \
         JOIN users u ON u.id = o.user_id WHERE o.metric_id IN ({placeholders}) \
         ORDER BY o.metric_id, o.position"
    );
    let tags_sql = format!(
        "SELECT metric_id, tag FROM metric_tags WHERE metric_id IN ({placeholders}) \
         ORDER BY metric_id, position"
    );
    let mut owners_query = sqlx::query(sqlx::AssertSqlSafe(owners_sql));
    let mut tags_query = sqlx::query(sqlx::AssertSqlSafe(tags_sql));
    for m in metrics.iter() {
        owners_query = owners_query.bind(m.id);
        tags_query = tags_query.bind(m.id);
    }
    for row in owners_query.fetch_all(&mut *conn).await? {
        let id: i64 = row.try_get("metric_id")?;
        if let Some(m) = metrics.iter_mut().find(|m| m.id == id) {
            m.owners.push(PersonRef {
                username: row.try_get("username")?,
                display_name: row.try_get("display_name")?,
            });
        }
    }
    for row in tags_query.fetch_all(&mut *conn).await? {
        let id: i64 = row.try_get("metric_id")?;
        if let Some(m) = metrics.iter_mut().find(|m| m.id == id) {
            m.tags.push(row.try_get("tag")?);
        }
    }
    Ok(())
}

async fn find_on(conn: &mut crate::store::Db, key: &str) -> StoreResult<Option<Metric>> {
    let row = sqlx::query(select_metrics!("WHERE m.key = $1"))
        .bind(key)
        .fetch_optional(&mut *conn)
        .await?;
    let Some(row) = row else {
        return Ok(None);
    };
    let mut metrics = [metric_from_row(&row)?];
    attach_owners_and_tags(conn, &mut metrics).await?;
    let [metric] = metrics;
    Ok(Some(metric))
}

pub async fn find(store: &Store, key: &str) -> StoreResult<Option<Metric>> {
    let mut conn = store.read().await?;
    find_on(&mut conn, key).await
}

pub async fn get(store: &Store, key: &str) -> StoreResult<Metric> {
    find(store, key).await?.ok_or_else(|| not_found(key))
}

/// The metric as the write transaction sees it (writers are serialised, so it cannot change
/// before the transaction ends).
pub async fn get_for_update(w: &mut WriteTx, key: &str) -> StoreResult<Metric> {
    find_on(w.conn(), key).await?.ok_or_else(|| not_found(key))
}

fn not_found(key: &str) -> StoreError {
    StoreError::NotFound(format!("no metric with key {key:?}"))
}

/// Escapes LIKE wildcards so user text matches literally (with `ESCAPE '\'`).
fn like_pattern(text: &str) -> String {
    let mut out = String::from("%");
    for c in text.to_lowercase().chars() {
        if matches!(c, '%' | '_' | '\\') {
            out.push('\\');
        }
        out.push(c);
    }
    out.push('%');
    out
}

/// The register search as a WHERE clause: $1 text, $2 its LIKE pattern, $3 tag, $4 owner.
macro_rules! metric_filter {
    () => {
        concat!(
            "WHERE ($1 = '' OR LOWER(m.key) LIKE $2 ESCAPE '\\' OR LOWER(m.name) LIKE $2 ESCAPE '\\' ",
            "OR EXISTS (SELECT 1 FROM metric_tags t WHERE t.metric_id = m.id AND t.tag LIKE $2 ESCAPE '\\')) ",
            "AND ($3 = '' OR EXISTS (SELECT 1 FROM metric_tags t WHERE t.metric_id = m.id AND t.tag = $3)) ",
            "AND ($4 = '' OR EXISTS (SELECT 1 FROM metric_owners o JOIN users u ON u.id = o.user_id ",
            "WHERE o.metric_id = m.id AND u.username = $4))"
        )
    };
}

pub const PER_PAGE_DEFAULT: i64 = 25;
pub const PER_PAGE_MAX: i64 = 100;

pub async fn list(
    store: &Store,
    filter: &MetricFilter,
    page: i64,
    per_page: i64,
) -> StoreResult<MetricPage> {
    let page = page.max(1);
    let per_page = per_page.clamp(1, PER_PAGE_MAX);
    let text = filter.text.trim();
    let pattern = like_pattern(text);
    let tag = filter.tag.trim().to_lowercase();
    let owner = filter.owner.trim();
    let mut conn = store.read().await?;
    let total: i64 =
        sqlx::query_scalar(concat!("SELECT COUNT(*) FROM metrics m ", metric_filter!()))
            .bind(text)
            .bind(&pattern)
            .bind(&tag)
            .bind(owner)
            .fetch_one(&mut conn)
            .await?;
    let rows = sqlx::query(concat!(
        select_metrics!(""),
        metric_filter!(),
        " ORDER BY m.key LIMIT $5 OFFSET $6"
    ))
    .bind(text)
    .bind(&pattern)
    .bind(&tag)
    .bind(owner)
    .bind(per_page)
    .bind((page - 1) * per_page)
    .fetch_all(&mut conn)
    .await?;
    let mut metrics = rows
        .iter()
        .map(metric_from_row)
        .collect::<StoreResult<Vec<_>>>()?;
    attach_owners_and_tags(&mut conn, &mut metrics).await?;
    Ok(MetricPage {
        metrics,
        total,
        page,
        per_page,
    })
}

/// Resolves owners to user ids; each must exist, be active and hold the `owner` role.
async fn resolve_owners(
    w: &mut WriteTx,
    owners: &[Username],
) -> StoreResult<Vec<(i64, PersonRef)>> {
    let mut problems = Problems::default();
    let mut out = Vec::new();
    for name in owners {
        let row = sqlx::query(
            "SELECT id, username, display_name, roles, active FROM users WHERE username = $1",
        )
        .bind(name.as_str())
        .fetch_optional(w.conn())
        .await?;
        match row {
            None => problems.add("owners", format!("no user named {:?}", name.as_str())),
            Some(row) => {
                let roles: String = row.try_get("roles")?;
                let active: i64 = row.try_get("active")?;
                let roles = crate::domain::Roles::parse_list(&roles).unwrap_or_default();
                if active == 0 {
                    problems.add(
                        "owners",
                        format!("{:?} is deactivated and cannot own a metric", name.as_str()),
                    );
                } else if !roles.has(Role::Owner) {
                    problems.add(
                        "owners",
                        format!(
                            "{:?} does not hold the owner role; an admin can grant it first",
                            name.as_str()
                        ),
                    );
                } else {
                    out.push((
                        row.try_get("id")?,
                        PersonRef {
                            username: row.try_get("username")?,
                            display_name: row.try_get("display_name")?,
                        },
                    ));
                }
            }
        }
    }
    if problems.is_empty() {
        Ok(out)
    } else {
        Err(StoreError::Invalid(problems))
    }
}

async fn write_owners(
    w: &mut WriteTx,
    metric_id: i64,
    owners: &[(i64, PersonRef)],
) -> StoreResult<()> {
    let user_ids: Vec<i64> = owners.iter().map(|(user_id, _)| *user_id).collect();
    write_list(w, metric_id, "metric_owners", "user_id", &user_ids).await
}

async fn write_tags(w: &mut WriteTx, metric_id: i64, tags: &[String]) -> StoreResult<()> {
    write_list(w, metric_id, "metric_tags", "tag", tags).await
}

/// Replaces one of a metric's ordered lists (its owners or its tags): the rows of `table`,
/// each holding one item in `column` and its position. `table` and `column` are names written
/// in this file, never input.
async fn write_list<T>(
    w: &mut WriteTx,
    metric_id: i64,
    table: &'static str,
    column: &'static str,
    items: &[T],
) -> StoreResult<()>
where
    T: Encode<'static, Any> + Type<Any> + Clone + Sync,
{
    let delete = format!("DELETE FROM {table} WHERE metric_id = $1");
    sqlx::query(sqlx::AssertSqlSafe(delete))
        .bind(metric_id)
        .execute(w.conn())
        .await?;
    let insert = format!("INSERT INTO {table} (metric_id, {column}, position) VALUES ($1, $2, $3)");
    for (position, item) in items.iter().enumerate() {
        sqlx::query(sqlx::AssertSqlSafe(insert.clone()))
            .bind(metric_id)
            .bind(item.clone())
            .bind(position as i64)
            .execute(w.conn())
            .await?;
    }
    Ok(())
}

/// Adds a metric to the register.
pub async fn create(
    w: &mut WriteTx,
    actor: &Actor,
    key: &MetricKey,
    fields: &MetricFields,
) -> StoreResult<Metric> {
    if find_on(w.conn(), key.as_str()).await?.is_some() {
        return Err(StoreError::Conflict(format!(
            "a metric with key {:?} already exists",
            key.as_str()
        )));
    }
    let owners = resolve_owners(w, &fields.owners).await?;
    let now = w.now();
    let id: i64 = sqlx::query_scalar(
        "INSERT INTO metrics (key, name, description, unit, data_source, review_cadence_months, created_at, updated_at) \
         VALUES ($1, $2, $3, $4, $5, $6, $7, $7) RETURNING id",
    )
    .bind(key.as_str())
    .bind(&fields.name)
    .bind(&fields.description)
    .bind(&fields.unit)
    .bind(&fields.data_source)
    .bind(fields.review_cadence_months)
    .bind(now)
    .fetch_one(w.conn())
    .await?;
    write_owners(w, id, &owners).await?;
    write_tags(w, id, &fields.tags).await?;
    let metric = Metric {
        id,
        key: key.clone(),
        name: fields.name.clone(),
        description: fields.description.clone(),
        unit: fields.unit.clone(),
        owners: owners.into_iter().map(|(_, o)| o).collect(),
        data_source: fields.data_source.clone(),
        review_cadence_months: fields.review_cadence_months,
        tags: fields.tags.clone(),
        created_at: now,
        updated_at: now,
    };
    let mut after = metric.fields_json();
    after.insert("key".into(), json!(metric.key));
    w.record(
        actor,
        "metric.created",
        &metric.subject(),
        json!({ "after": after }),
    )
    .await?;
    Ok(metric)
}

/// Applies a patch; records only the fields that changed, before and after. A patch that
/// changes nothing records nothing.
pub async fn update(
    w: &mut WriteTx,
    actor: &Actor,
    key: &str,
    patch: &MetricPatch,
) -> StoreResult<Metric> {
    let old = find_on(w.conn(), key)
        .await?
        .ok_or_else(|| not_found(key))?;
    let mut new = old.clone();
    if let Some(v) = &patch.name {
        new.name = v.clone();
    }
    if let Some(v) = &patch.description {
        new.description = v.clone();
    }
    if let Some(v) = &patch.unit {
        new.unit = v.clone();
    }
    if let Some(v) = &patch.data_source {
        new.data_source = v.clone();
    }
    if let Some(v) = patch.review_cadence_months {
        new.review_cadence_months = v;
    }
    if let Some(v) = &patch.tags {
        new.tags = v.clone();
    }
    let owners = match &patch.owners {
        Some(names) => {
            let resolved = resolve_owners(w, names).await?;
            new.owners = resolved.iter().map(|(_, o)| o.clone()).collect();
            Some(resolved)
        }
        None => None,
    };
    let (before_all, after_all) = (old.fields_json(), new.fields_json());
    let mut before = Map::new();
    let mut after = Map::new();
    for (field, value) in &after_all {
        if before_all.get(field) != Some(value) {
            before.insert(field.clone(), before_all[field].clone());
            after.insert(field.clone(), value.clone());
        }
    }
    if after.is_empty() {
        return Ok(old);
    }
    new.updated_at = w.now();
    sqlx::query(
        "UPDATE metrics SET name = $1, description = $2, unit = $3, data_source = $4, \
         review_cadence_months = $5, updated_at = $6 WHERE id = $7",
    )
    .bind(&new.name)
    .bind(&new.description)
    .bind(&new.unit)
    .bind(&new.data_source)
    .bind(new.review_cadence_months)
    .bind(new.updated_at)
    .bind(new.id)
    .execute(w.conn())
    .await?;
    if let Some(resolved) = owners
        && after.contains_key("owners")
    {
        write_owners(w, new.id, &resolved).await?;
    }
    if after.contains_key("tags") {
        write_tags(w, new.id, &new.tags).await?;
    }
    w.record(
        actor,
        "metric.edited",
        &new.subject(),
        json!({"before": before, "after": after}),
    )
    .await?;
    Ok(new)
}

/// How many metrics exist (tests check that refused requests wrote nothing).
pub async fn count(store: &Store) -> StoreResult<i64> {
    Ok(sqlx::query_scalar("SELECT COUNT(*) FROM metrics")
        .fetch_one(&mut store.read().await?)
        .await?)
}

//! Creating, editing and reading metrics.

use serde::Deserialize;

use super::{OpError, OpResult};
use crate::domain::Metric;
use crate::domain::Problems;
use crate::domain::User;
use crate::domain::metric::{self, MetricFields};
use crate::domain::{MetricKey, Role};
use crate::store::metrics::MetricPatch;
use crate::store::{Actor, Store};

/// A new metric as submitted, before validation. The API deserialises into it; the form
/// handler fills it from text fields.
#[derive(Clone, Debug, Default, Deserialize, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub struct NewMetric {
    pub key: String,
    pub name: String,
    #[serde(default)]
    pub description: String,
    #[serde(default)]
    pub unit: String,
    #[serde(default)]
    pub owners: Vec<String>,
    #[serde(default)]
    pub data_source: String,
    #[serde(default)]
    pub review_cadence_months: Option<i64>,
    #[serde(default)]
    pub tags: Vec<String>,
}

/// A change to descriptive fields as submitted; absent fields stay as they are.
#[derive(Clone, Debug, Default, Deserialize, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub struct MetricEdit {
    pub name: Option<String>,
    pub description: Option<String>,
    pub unit: Option<String>,
    pub owners: Option<Vec<String>>,
    pub data_source: Option<String>,
    /// `null` clears the cadence; absent leaves it.
    #[serde(default, deserialize_with = "present_or_null")]
    #[schema(value_type = Option<i64>, required = false)]
    pub review_cadence_months: Option<Option<i64>>,
    pub tags: Option<Vec<String>>,
}

/// Tells a field that is absent (outer `None`) from one that is `null` (`Some(None)`).
fn present_or_null<'de, D: serde::Deserializer<'de>>(
    d: D,
) -> Result<Option<Option<i64>>, D::Error> {
    Option::<i64>::deserialize(d).map(Some)
}

pub fn validate_new(input: &NewMetric) -> Result<(MetricKey, MetricFields), Problems> {
    let mut p = Problems::default();
    let key = p.check(
        "key",
        MetricKey::parse(crate::domain::text::trim(&input.key)),
    );
    let name = p.check("name", metric::name(&input.name));
    let description = p.check("description", metric::description(&input.description));
    let unit = p.check("unit", metric::unit(&input.unit));
    let owners = p.check("owners", metric::owners(&input.owners));
    let data_source = p.check("data_source", metric::data_source(&input.data_source));
    let cadence = p.check(
        "review_cadence_months",
        metric::review_cadence(input.review_cadence_months),
    );
    let tags = p.check("tags", metric::tags(&input.tags));
    match (
        key,
        name,
        description,
        unit,
        owners,
        data_source,
        cadence,
        tags,
    ) {
        (
            Some(key),
            Some(name),
            Some(description),
            Some(unit),
            Some(owners),
            Some(data_source),
            Some(cadence),
            Some(tags),
        ) if p.is_empty() => Ok((
            key,
            MetricFields {
                name,
                description,
                unit,
                owners,
                data_source,
                review_cadence_months: cadence,
                tags,
            },
        )),
        _ => Err(p),
    }
}

pub fn validate_edit(input: &MetricEdit) -> Result<MetricPatch, Problems> {
    let mut p = Problems::default();
    let patch = MetricPatch {
        name: p.check_given("name", input.name.as_deref(), metric::name),
        description: p.check_given(
            "description",
            input.description.as_deref(),
            metric::description,
        ),
        unit: p.check_given("unit", input.unit.as_deref(), metric::unit),
        owners: p.check_given("owners", input.owners.as_deref(), metric::owners),
        data_source: p.check_given(
            "data_source",
            input.data_source.as_deref(),
            metric::data_source,
        ),
        review_cadence_months: p.check_given(
            "review_cadence_months",
            input.review_cadence_months,
            metric::review_cadence,
        ),
        tags: p.check_given("tags", input.tags.as_deref(), metric::tags),
    };
    if p.is_empty() { Ok(patch) } else { Err(p) }
}

/// Admins add metrics to the register and name their owners.
pub async fn create(store: &Store, by: &User, input: &NewMetric) -> OpResult<Metric> {
    if !by.roles.has(Role::Admin) {
        return Err(OpError::Forbidden(
            "only an admin may add metrics to the register".into(),
        ));
    }
    let (key, fields) = validate_new(input)?;
    let mut w = store.begin_write().await?;
    let metric =
        crate::store::metrics::create(&mut w, &Actor::User(by.username.to_string()), &key, &fields)
            .await?;
    w.commit().await?;
    Ok(metric)
}

/// Who may edit what: admins edit everything; a metric's owners edit its descriptive fields
/// but not its owners.
pub fn edit_permission(by: &User, metric: &Metric, edit: &MetricEdit) -> OpResult<()> {
    if by.roles.has(Role::Admin) {
        return Ok(());
    }
    if !metric.is_owner(&by.username) {
        return Err(OpError::Forbidden(
            "only the metric's owners or an admin may edit it".into(),
        ));
    }
    if edit.owners.is_some() {
        return Err(OpError::Forbidden(
            "only an admin may change who owns a metric".into(),
        ));
    }
    Ok(())
}

pub async fn edit(store: &Store, by: &User, key: &str, input: &MetricEdit) -> OpResult<Metric> {
    let mut w = store.begin_write().await?;
    // Checked inside the write transaction, so ownership cannot change in between; who may
    // edit is checked before what they sent.
    let current = crate::store::metrics::get_for_update(&mut w, key).await?;
    edit_permission(by, &current, input)?;
    let patch = validate_edit(input)?;
    let metric =
        crate::store::metrics::update(&mut w, &Actor::User(by.username.to_string()), key, &patch)
            .await?;
    w.commit().await?;
    Ok(metric)
}

pub use crate::store::metrics::{MetricFilter, MetricPage, PER_PAGE_DEFAULT, PER_PAGE_MAX};

/// A metric of the register (404 when there is none with that key).
pub async fn get(store: &Store, key: &str) -> OpResult<Metric> {
    Ok(crate::store::metrics::get(store, key).await?)
}

/// One page of the register, as the filter asks.
pub async fn list(
    store: &Store,
    filter: &MetricFilter,
    page: i64,
    per_page: i64,
) -> OpResult<MetricPage> {
    Ok(crate::store::metrics::list(store, filter, page, per_page).await?)
}

//! Reading a JSON upload, item by item, from a parsed document or straight from its bytes.

use super::kept::{Kept, Place, finish};
use super::{Observation, RowProblem, checked, echo, period};

/// Reads a JSON upload: `{"observations": [{"period_start": "2026-03-01", "value": 71.5}, ...]}`.
pub fn from_json(body: &serde_json::Value) -> Result<Vec<Observation>, Vec<RowProblem>> {
    let Some(items) = body.get("observations").and_then(|v| v.as_array()) else {
        return Err(no_observations_array());
    };
    let mut reader = JsonItems::default();
    for item in items {
        reader.item(item);
    }
    finish(reader.kept)
}

/// Reads a JSON upload from its bytes, one item at a time, so that memory grows with the
/// observations kept rather than with a parsed copy of the whole document.
pub fn from_json_bytes(bytes: &[u8]) -> Result<Vec<Observation>, Vec<RowProblem>> {
    use serde::de::DeserializeSeed;
    let mut reader = JsonItems::default();
    let mut de = serde_json::Deserializer::from_slice(bytes);
    let found = Top(&mut reader)
        .deserialize(&mut de)
        .and_then(|found| de.end().map(|()| found));
    match found {
        Ok(true) => finish(reader.kept),
        Ok(false) => Err(no_observations_array()),
        Err(e) => Err(vec![RowProblem {
            line: Some(e.line() as u64),
            item: None,
            reason: format!(
                "not JSON of the expected shape: {}",
                crate::domain::json_errors::describe(&e)
            ),
        }]),
    }
}

fn no_observations_array() -> Vec<RowProblem> {
    vec![RowProblem {
        line: None,
        item: None,
        reason: "expected an object with an \"observations\" array".into(),
    }]
}

/// The top-level object: its `observations` array is read item by item; other keys are
/// skipped.
struct Top<'a>(&'a mut JsonItems);

impl<'de> serde::de::DeserializeSeed<'de> for Top<'_> {
    type Value = bool;

    fn deserialize<D: serde::Deserializer<'de>>(self, d: D) -> Result<bool, D::Error> {
        d.deserialize_map(self)
    }
}

impl<'de> serde::de::Visitor<'de> for Top<'_> {
    type Value = bool;

    fn expecting(&self, f: &mut std::fmt::Formatter) -> std::fmt::Result {
        f.write_str("an object with an \"observations\" array")
    }

    fn visit_map<A: serde::de::MapAccess<'de>>(self, mut map: A) -> Result<bool, A::Error> {
        let mut found = false;
        while let Some(key) = map.next_key::<String>()? {
            if key == "observations" && !found {
                map.next_value_seed(Items(&mut *self.0))?;
                found = true;
            } else {
                map.next_value::<serde::de::IgnoredAny>()?;
            }
        }
        Ok(found)
    }
}

struct Items<'a>(&'a mut JsonItems);

impl<'de> serde::de::DeserializeSeed<'de> for Items<'_> {
    type Value = ();

    fn deserialize<D: serde::Deserializer<'de>>(self, d: D) -> Result<(), D::Error> {
        d.deserialize_seq(self)
    }
}

impl<'de> serde::de::Visitor<'de> for Items<'_> {
    type Value = ();

    fn expecting(&self, f: &mut std::fmt::Formatter) -> std::fmt::Result {
        f.write_str("an array of observations")
    }

    fn visit_seq<A: serde::de::SeqAccess<'de>>(self, mut seq: A) -> Result<(), A::Error> {
        while let Some(item) = seq.next_element::<serde_json::Value>()? {
            self.0.item(&item);
        }
        Ok(())
    }
}

/// The observations and problems of a JSON upload, item by item.
#[derive(Default)]
struct JsonItems {
    kept: Kept,
    seen: u64,
}

impl JsonItems {
    fn item(&mut self, item: &serde_json::Value) {
        self.seen += 1;
        let n = self.seen;
        let Some(object) = item.as_object() else {
            self.kept.problems.push(RowProblem::item(
                n,
                "expected an object with period_start and value",
            ));
            return;
        };
        if let Some(other) = object
            .keys()
            .find(|k| *k != "period_start" && *k != "value")
        {
            self.kept.problems.push(RowProblem::item(
                n,
                format!("unknown field {}", echo(other)),
            ));
            return;
        }
        let p = match object.get("period_start") {
            Some(serde_json::Value::String(s)) => period(s.trim()),
            None | Some(serde_json::Value::Null) => Err("missing period start".into()),
            Some(_) => Err("period_start must be a string".into()),
        };
        let v = match object.get("value") {
            Some(serde_json::Value::Number(x)) => x
                .as_f64()
                .ok_or_else(|| "non-finite value".to_string())
                .and_then(checked),
            None | Some(serde_json::Value::Null) => Err("missing value".into()),
            Some(_) => Err("value must be a number".into()),
        };
        self.kept.take(Place::Item(n), p, v);
    }
}

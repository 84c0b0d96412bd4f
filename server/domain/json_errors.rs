//! What was wrong with a JSON value, in the API's own words. The reader's own messages name
//! what the program expected in the program's terms (`expected struct NewMetric with 8
//! elements`, `expected i64`, `unknown variant`); a client needs the JSON type instead: an
//! object, an array, a string, a number, a whole number, true or false, null.

/// The message of a JSON reading error, without its position, for a client: data errors
/// (a value of the wrong type, a wrong length, an unknown value) in the API's words; other
/// messages (syntax, missing or unknown fields, a field's own check) as they are.
pub fn describe(error: &serde_json::Error) -> String {
    let message = without_position(error);
    if let Some(rest) = message.strip_prefix("invalid type: ") {
        return expected_got(rest);
    }
    if let Some(rest) = message.strip_prefix("invalid value: ") {
        return expected_got(rest);
    }
    if let Some(rest) = message.strip_prefix("invalid length ") {
        return wrong_length(rest);
    }
    if let Some(rest) = message.strip_prefix("unknown variant ") {
        return unknown_value(rest);
    }
    message
}

/// The message without serde_json's " at line L column C".
fn without_position(error: &serde_json::Error) -> String {
    let message = error.to_string();
    let position = format!(" at line {} column {}", error.line(), error.column());
    match message.strip_suffix(&position) {
        Some(m) => m.to_string(),
        None => message,
    }
}

/// `UNEXPECTED, expected EXPECTED` as "expected EXPECTED', got UNEXPECTED'".
fn expected_got(rest: &str) -> String {
    match rest.rsplit_once(", expected ") {
        Some((got, expected)) => format!("expected {}, got {}", json_type(expected), value(got)),
        None => rest.to_string(),
    }
}

/// `N, expected EXPECTED`: an array of the wrong length. For a struct the reader also takes
/// an array of its fields in order; an object is what the API documents, so it says so.
fn wrong_length(rest: &str) -> String {
    match rest.split_once(", expected ") {
        Some((_, expected)) if is_object(expected) => {
            "expected a JSON object, got an array".to_string()
        }
        Some((n, expected)) => format!("expected {}, got {n} items", json_type(expected)),
        None => rest.to_string(),
    }
}

/// `` `x`, expected one of `a`, `b` `` as `unknown value "x": expected one of "a", "b"`.
fn unknown_value(rest: &str) -> String {
    let (given, allowed) = match rest.split_once(", expected ") {
        Some((given, allowed)) => (given, Some(allowed)),
        None => (rest.split(", ").next().unwrap_or(rest), None),
    };
    let quoted = |t: &str| t.replace('`', "\"");
    match allowed {
        Some(allowed) => format!(
            "unknown value {}: expected {}",
            quoted(given),
            quoted(allowed)
        ),
        None => format!("unknown value {}", quoted(given)),
    }
}

fn is_object(expected: &str) -> bool {
    expected.starts_with("struct ")
        || expected.starts_with("tuple struct ")
        || expected.starts_with("unit struct ")
        || expected == "a map"
        || expected == "map"
}

/// What the reader expected, as the JSON type a client must send.
fn json_type(expected: &str) -> String {
    let plain = match expected {
        _ if is_object(expected) => "a JSON object",
        "a sequence" | "sequence" | "tuple" => "a JSON array",
        _ if expected.starts_with("a tuple of size") || expected.starts_with("an array of") => {
            "a JSON array"
        }
        "a string" | "a borrowed string" | "a character" | "a string or bytes" => "a string",
        "i8" | "i16" | "i32" | "i64" | "i128" | "isize" | "u8" | "u16" | "u32" | "u64" | "u128"
        | "usize" => "a whole number",
        "f32" | "f64" => "a number",
        "a boolean" => "true or false",
        "unit" | "unit value" => "null",
        "option" => "a value or null",
        _ if expected.starts_with("enum ")
            || expected.ends_with(" variant")
            || expected.contains("variant ")
            || expected == "variant identifier" =>
        {
            "one of the allowed values (a string)"
        }
        "field identifier" => "a field name",
        other => return other.to_string(),
    };
    plain.to_string()
}

/// What the reader found, as JSON: `integer `5`` is the number 5, `sequence` an array.
fn value(found: &str) -> String {
    let between_ticks = |prefix: &str| {
        found
            .strip_prefix(prefix)
            .and_then(|r| r.strip_prefix('`'))
            .and_then(|r| r.strip_suffix('`'))
            .map(str::to_string)
    };
    if let Some(n) = between_ticks("integer ").or_else(|| between_ticks("floating point ")) {
        return format!("the number {n}");
    }
    if let Some(b) = between_ticks("boolean ") {
        return b;
    }
    if let Some(s) = found.strip_prefix("string ") {
        return format!("the string {s}");
    }
    if let Some(c) = between_ticks("character ") {
        return format!("the string {c:?}");
    }
    match found {
        "sequence" => "an array",
        "map" => "an object",
        "unit value" | "Option value" => "null",
        "byte array" => "bytes",
        "newtype struct" | "enum" | "unit variant" | "newtype variant" | "tuple variant"
        | "struct variant" => "another kind of value",
        other => other,
    }
    .to_string()
}

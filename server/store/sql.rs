//! SQL text built at run time, which only ever splices in numbered placeholders: every value
//! travels as a bound parameter.

/// `$1, $2, ... $n`, for an `IN (...)` list of `n` bound values.
pub(super) fn placeholders(n: usize) -> String {
    (1..=n)
        .map(|i| format!("${i}"))
        .collect::<Vec<_>>()
        .join(", ")
}

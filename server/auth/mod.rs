//! Credentials: password hashing and random secrets (session ids, CSRF and API tokens).
//! Plain Rust; the store keeps only hashes.

pub mod password;
pub mod secret;

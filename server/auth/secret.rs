//! Random secrets and their stored hashes.

use base64::Engine;
use base64::engine::general_purpose::URL_SAFE_NO_PAD;
use sha2::{Digest, Sha256};

/// 32 random bytes from the operating system, base64url-encoded after `prefix_`.
pub fn random_token(prefix: &str) -> String {
    let mut bytes = [0u8; 32];
    getrandom::fill(&mut bytes).expect("the operating system has randomness");
    format!("{prefix}_{}", URL_SAFE_NO_PAD.encode(bytes))
}

/// What the database keeps of a session id or API token: its SHA-256, hex. The secrets carry
/// 256 random bits, so a fast hash suffices (a slow one would only slow every request).
pub fn stored_hash(secret: &str) -> String {
    hex::encode(Sha256::digest(secret.as_bytes()))
}

/// Compares two secrets in time that does not depend on where they differ.
pub fn constant_time_eq(a: &str, b: &str) -> bool {
    let (a, b) = (a.as_bytes(), b.as_bytes());
    if a.len() != b.len() {
        return false;
    }
    a.iter().zip(b).fold(0u8, |acc, (x, y)| acc | (x ^ y)) == 0
}

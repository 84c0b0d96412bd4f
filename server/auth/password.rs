//! Password hashing with argon2id at the OWASP Password Storage Cheat Sheet's minimum
//! configuration (m = 19456 KiB, t = 2, p = 1).

use argon2::password_hash::phc::PasswordHash;
use argon2::password_hash::{PasswordHasher, PasswordVerifier};
use argon2::{Algorithm, Argon2, Params, Version};

pub const MEMORY_KIB: u32 = 19_456;
pub const ITERATIONS: u32 = 2;
pub const PARALLELISM: u32 = 1;

fn hasher() -> Argon2<'static> {
    let params = Params::new(MEMORY_KIB, ITERATIONS, PARALLELISM, None)
        .expect("the OWASP parameters are valid");
    Argon2::new(Algorithm::Argon2id, Version::V0x13, params)
}

/// Hashes a password into a PHC string (`$argon2id$v=19$m=19456,t=2,p=1$...`). Costs tens of
/// milliseconds: call it off the async threads (`spawn_blocking`).
pub fn hash(password: &str) -> String {
    hasher()
        .hash_password(password.as_bytes())
        .expect("hashing with a fresh salt cannot fail")
        .to_string()
}

/// Checks a password against a stored PHC string; a malformed string never matches.
pub fn verify(password: &str, phc: &str) -> bool {
    match PasswordHash::new(phc) {
        Ok(parsed) => hasher()
            .verify_password(password.as_bytes(), &parsed)
            .is_ok(),
        Err(_) => false,
    }
}

/// A hash of a random password, verified against when the username is unknown so that a
/// failed sign-in takes as long whether or not the account exists.
pub fn decoy_hash() -> &'static str {
    static DECOY: std::sync::OnceLock<String> = std::sync::OnceLock::new();
    DECOY.get_or_init(|| hash(&super::secret::random_token("decoy")))
}

//! The signing key: Ed25519 (RFC 8032). The private key lives in a file named by
//! configuration; the database keeps the registry of public keys (current and retired), so
//! every instance signs with a registered key and old sets stay verifiable after a rotation.

use std::io::Write;
use std::path::{Path, PathBuf};

use base64::Engine;
use base64::engine::general_purpose::URL_SAFE_NO_PAD;
use ed25519_dalek::{Signer as _, SigningKey};
use serde::Serialize;
use serde_json::json;
use sha2::{Digest, Sha256};
use sqlx::Row;

use crate::domain::Timestamp;
use crate::store::{Actor, Store, StoreError, StoreResult};

/// The first line of a key file, so a stray file is never mistaken for a key.
const FILE_HEADER: &str = "cutpoints Ed25519 signing key, seed in base64url";

/// The key an instance signs with.
#[derive(Clone)]
pub struct Signer {
    key: SigningKey,
    key_id: String,
}

impl std::fmt::Debug for Signer {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        // Never the private key.
        f.debug_struct("Signer")
            .field("key_id", &self.key_id)
            .finish()
    }
}

/// `ed25519-` and the first 16 hex characters of the SHA-256 of the raw public key.
pub fn key_id_of(public: &[u8; 32]) -> String {
    format!("ed25519-{}", &hex::encode(Sha256::digest(public))[..16])
}

impl Signer {
    pub fn from_seed(seed: [u8; 32]) -> Signer {
        let key = SigningKey::from_bytes(&seed);
        let key_id = key_id_of(&key.verifying_key().to_bytes());
        Signer { key, key_id }
    }

    fn generate() -> Signer {
        let mut seed = [0u8; 32];
        getrandom::fill(&mut seed).expect("the operating system has randomness");
        Signer::from_seed(seed)
    }

    pub fn key_id(&self) -> &str {
        &self.key_id
    }

    /// The raw 32-byte public key, base64url without padding.
    pub fn public_key(&self) -> String {
        URL_SAFE_NO_PAD.encode(self.key.verifying_key().to_bytes())
    }

    /// The Ed25519 signature of `message`, base64url without padding.
    pub fn sign(&self, message: &[u8]) -> String {
        URL_SAFE_NO_PAD.encode(self.key.sign(message).to_bytes())
    }

    fn file_text(&self) -> String {
        format!(
            "{FILE_HEADER}\n{}\n",
            URL_SAFE_NO_PAD.encode(self.key.to_bytes())
        )
    }
}

fn config(message: String) -> StoreError {
    StoreError::Config(message)
}

fn read_key_file(path: &Path) -> StoreResult<Signer> {
    let text = std::fs::read_to_string(path).map_err(|e| {
        config(format!(
            "cannot read the signing key {}: {e}",
            path.display()
        ))
    })?;
    let mut lines = text.lines();
    let seed = match (lines.next(), lines.next()) {
        (Some(FILE_HEADER), Some(seed)) => URL_SAFE_NO_PAD.decode(seed.trim()).ok(),
        _ => None,
    };
    let seed: [u8; 32] = seed.and_then(|s| s.try_into().ok()).ok_or_else(|| {
        config(format!(
            "{} is not a cutpoints signing key file",
            path.display()
        ))
    })?;
    Ok(Signer::from_seed(seed))
}

/// Writes a key file readable by its owner only (mode 0600), refusing to overwrite.
fn write_key_file(path: &Path, signer: &Signer, replace: bool) -> StoreResult<()> {
    let mut options = std::fs::OpenOptions::new();
    options.write(true);
    if replace {
        options.create(true).truncate(true);
    } else {
        options.create_new(true);
    }
    #[cfg(unix)]
    {
        use std::os::unix::fs::OpenOptionsExt;
        options.mode(0o600);
    }
    let mut file = options.open(path).map_err(|e| {
        config(format!(
            "cannot write the signing key {}: {e}",
            path.display()
        ))
    })?;
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        file.set_permissions(std::fs::Permissions::from_mode(0o600))
            .map_err(|e| config(format!("cannot restrict {}: {e}", path.display())))?;
    }
    file.write_all(signer.file_text().as_bytes())
        .and_then(|_| file.sync_all())
        .map_err(|e| {
            config(format!(
                "cannot write the signing key {}: {e}",
                path.display()
            ))
        })
}

/// A registered public key, current or retired.
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct PublicKey {
    /// `ed25519-` and the first 16 hex digits of the SHA-256 of the raw key.
    pub key_id: String,
    /// `Ed25519`.
    pub algorithm: String,
    /// The raw 32-byte Ed25519 public key (RFC 8032), base64url without padding.
    pub public_key: String,
    /// `current` or `retired`.
    pub status: &'static str,
    pub created_at: Timestamp,
    pub retired_at: Option<Timestamp>,
}

pub async fn registry(store: &Store) -> StoreResult<Vec<PublicKey>> {
    let rows = sqlx::query(
        "SELECT key_id, algorithm, public_key, created_at, retired_at FROM signing_keys ORDER BY created_at, key_id",
    )
    .fetch_all(&mut store.read().await?)
    .await?;
    rows.iter()
        .map(|r| {
            let retired_at: Option<Timestamp> = r.try_get("retired_at")?;
            Ok(PublicKey {
                key_id: r.try_get("key_id")?,
                algorithm: r.try_get("algorithm")?,
                public_key: r.try_get("public_key")?,
                status: if retired_at.is_some() {
                    "retired"
                } else {
                    "current"
                },
                created_at: r.try_get("created_at")?,
                retired_at,
            })
        })
        .collect()
}

async fn register(
    store: &Store,
    signer: &Signer,
    actor: &Actor,
    retire_others: bool,
) -> StoreResult<()> {
    let mut w = store.begin_write().await?;
    let now = w.now();
    if retire_others {
        sqlx::query("UPDATE signing_keys SET retired_at = $1 WHERE retired_at IS NULL")
            .bind(now)
            .execute(w.conn())
            .await?;
    }
    sqlx::query(
        "INSERT INTO signing_keys (key_id, algorithm, public_key, created_at) VALUES ($1, 'Ed25519', $2, $3)",
    )
    .bind(signer.key_id())
    .bind(signer.public_key())
    .bind(now)
    .execute(w.conn())
    .await?;
    w.record(
        actor,
        if retire_others { "key.rotated" } else { "key.registered" },
        &format!("key:{}", signer.key_id()),
        json!({"key_id": signer.key_id(), "algorithm": "Ed25519", "public_key": signer.public_key()}),
    )
    .await?;
    w.commit().await
}

/// The key this instance signs with. A missing file is created (0600) only when no key is
/// registered yet; a key that is not the registry's current one refuses to start, so that
/// every instance sharing the database signs with the same registered key.
pub async fn load_or_create(store: &Store, path: &Path) -> StoreResult<Signer> {
    let keys = registry(store).await?;
    let current = keys.iter().find(|k| k.status == "current");
    if !path.exists() {
        if let Some(k) = current {
            return Err(config(format!(
                "the signing key file {} is missing but the database has key {} registered: copy that key file here, or run `cutpoints keys rotate` to make a new one",
                path.display(),
                k.key_id
            )));
        }
        let signer = Signer::generate();
        write_key_file(path, &signer, false)?;
        register(store, &signer, &Actor::Cli, false).await?;
        tracing::info!(key_id = signer.key_id(), path = %path.display(), "created a signing key");
        return Ok(signer);
    }
    let signer = read_key_file(path)?;
    match current {
        Some(k) if k.key_id == signer.key_id() && k.public_key == signer.public_key() => Ok(signer),
        Some(k) => Err(config(format!(
            "the signing key in {} ({}) is not the registered current key {}; refusing to start",
            path.display(),
            signer.key_id(),
            k.key_id
        ))),
        None if keys.iter().any(|k| k.key_id == signer.key_id()) => Err(config(format!(
            "the signing key in {} ({}) was retired; use the current key file or run `cutpoints keys rotate`",
            path.display(),
            signer.key_id()
        ))),
        None => {
            register(store, &signer, &Actor::Cli, false).await?;
            Ok(signer)
        }
    }
}

/// Makes a new key, writes it over the key file, registers it as current and retires the
/// previous one (its public key stays listed, so sets it signed stay verifiable).
pub async fn rotate(store: &Store, path: &Path) -> StoreResult<Signer> {
    let signer = Signer::generate();
    let tmp = PathBuf::from(format!("{}.new", path.display()));
    write_key_file(&tmp, &signer, true)?;
    register(store, &signer, &Actor::Cli, true).await?;
    std::fs::rename(&tmp, path).map_err(|e| {
        config(format!(
            "cannot move the new key into {}: {e}",
            path.display()
        ))
    })?;
    Ok(signer)
}

//! The event record's hash chain, as pure functions: the canonical encoding of an event, its
//! chain hash, and verification of a sequence of stored entries. `docs/audit-chain.md` states
//! the construction so anyone can re-verify an export with their own tools.

pub mod chain;
pub mod register;
pub mod replay;

pub use chain::{
    Break, Entry, Event, EventParts, GENESIS_HASH, Verifier, canonical_event, canonical_parts,
    canonical_payload, chain_hash, chain_hash_parts, parse_known_head,
};

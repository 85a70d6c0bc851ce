//! Ed25519 keys and signatures over canonical bytes, and signed HTTP requests.
//!
//! Keys are stored as 64 hex characters (the 32-byte seed or public key) in a file of their
//! own. Signatures travel as 128 hex characters.
//!
//! A worker request is authenticated by four headers: [`HDR_WORKER`] (its id, `0` for an
//! enrolment), [`HDR_TIME`] (unix seconds), [`HDR_NONCE`] (32 hex characters, fresh for every
//! request) and [`HDR_SIGNATURE`], a signature over [`request_bytes`]. The signed bytes name
//! the coordinator's public key and the worker id, so a request signed for one coordinator
//! or one worker is worthless to another. The coordinator refuses a time more than
//! [`MAX_CLOCK_SKEW_S`] away from its own clock and remembers every nonce for longer than
//! that window, so a captured request can be sent only once.

use ed25519_dalek::{Signature, Signer, SigningKey, VerifyingKey};
use sha2::{Digest as _, Sha256};

pub use ed25519_dalek::{SigningKey as SecretKey, VerifyingKey as PublicKey};

pub const HDR_WORKER: &str = "x-cubehunt-worker";
pub const HDR_TIME: &str = "x-cubehunt-time";
pub const HDR_SIGNATURE: &str = "x-cubehunt-signature";
pub const HDR_NONCE: &str = "x-cubehunt-nonce";
pub const MAX_CLOCK_SKEW_S: i64 = 300;

#[derive(Debug, thiserror::Error)]
pub enum SignError {
    #[error("key is not 64 hex characters")]
    BadKey,
    #[error("signature is not 128 hex characters")]
    BadSignatureEncoding,
    #[error("signature does not verify")]
    Invalid,
}

pub fn generate() -> SigningKey {
    SigningKey::generate(&mut rand_core::OsRng)
}

pub fn secret_to_hex(k: &SigningKey) -> String {
    hex::encode(k.to_bytes())
}

pub fn secret_from_hex(s: &str) -> Result<SigningKey, SignError> {
    let b: [u8; 32] = hex::decode(s.trim())
        .ok()
        .and_then(|v| v.try_into().ok())
        .ok_or(SignError::BadKey)?;
    Ok(SigningKey::from_bytes(&b))
}

pub fn public_to_hex(k: &VerifyingKey) -> String {
    hex::encode(k.to_bytes())
}

pub fn public_from_hex(s: &str) -> Result<VerifyingKey, SignError> {
    let b: [u8; 32] = hex::decode(s.trim())
        .ok()
        .and_then(|v| v.try_into().ok())
        .ok_or(SignError::BadKey)?;
    VerifyingKey::from_bytes(&b).map_err(|_| SignError::BadKey)
}

/// Sign bytes; hex signature.
pub fn sign(key: &SigningKey, msg: &[u8]) -> String {
    hex::encode(key.sign(msg).to_bytes())
}

/// Verify a hex signature over bytes (strict verification: no malleable encodings).
pub fn verify(key: &VerifyingKey, msg: &[u8], sig_hex: &str) -> Result<(), SignError> {
    let b: [u8; 64] = hex::decode(sig_hex.trim())
        .ok()
        .and_then(|v| v.try_into().ok())
        .ok_or(SignError::BadSignatureEncoding)?;
    let sig = Signature::from_bytes(&b);
    key.verify_strict(msg, &sig)
        .map_err(|_| SignError::Invalid)?;
    Ok(())
}

/// What a signed request says about itself, besides its method, path and body.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Stamp {
    /// Hex public key of the coordinator the request is meant for.
    pub coordinator: String,
    pub worker: i64,
    pub time: i64,
    /// 32 lowercase hex characters, never used twice by one worker.
    pub nonce: String,
}

impl Stamp {
    /// A fresh stamp: random nonce, the given time.
    pub fn new(coordinator: &str, worker: i64, time: i64) -> Stamp {
        let mut b = [0u8; 16];
        rand_core::RngCore::fill_bytes(&mut rand_core::OsRng, &mut b);
        Stamp {
            coordinator: coordinator.to_ascii_lowercase(),
            worker,
            time,
            nonce: hex::encode(b),
        }
    }
}

/// Whether a nonce has the required form (32 lowercase hex characters).
pub fn nonce_well_formed(n: &str) -> bool {
    n.len() == 32 && n.bytes().all(|b| matches!(b, b'0'..=b'9' | b'a'..=b'f'))
}

/// The bytes a worker signs for one HTTP request.
pub fn request_bytes(stamp: &Stamp, method: &str, path: &str, body: &[u8]) -> Vec<u8> {
    let h = Sha256::digest(body);
    format!(
        "cubehunt-request/2\ncoordinator={}\nworker={}\ntime={}\nnonce={}\n{}\n{}\n{}\n",
        stamp.coordinator,
        stamp.worker,
        stamp.time,
        stamp.nonce,
        method.to_ascii_uppercase(),
        path,
        hex::encode(h)
    )
    .into_bytes()
}

/// SHA-256 of bytes, hex.
pub fn sha256_hex(b: &[u8]) -> String {
    hex::encode(Sha256::digest(b))
}

#[cfg(test)]
mod tests {
    use super::*;
    #[test]
    fn sign_verify_and_tamper() {
        let k = generate();
        let s = sign(&k, b"hello");
        assert!(verify(&k.verifying_key(), b"hello", &s).is_ok());
        assert!(verify(&k.verifying_key(), b"hellO", &s).is_err());
        let other = generate();
        assert!(verify(&other.verifying_key(), b"hello", &s).is_err());
        assert!(verify(&k.verifying_key(), b"hello", "zz").is_err());
        let k2 = secret_from_hex(&secret_to_hex(&k)).unwrap();
        assert_eq!(k2.to_bytes(), k.to_bytes());
        let p = public_from_hex(&public_to_hex(&k.verifying_key())).unwrap();
        assert_eq!(p, k.verifying_key());
    }
    #[test]
    fn request_bytes_name_coordinator_worker_and_nonce() {
        let a = Stamp::new("AB", 3, 100);
        assert!(nonce_well_formed(&a.nonce));
        assert_ne!(a.nonce, Stamp::new("ab", 3, 100).nonce);
        let base = request_bytes(&a, "post", "/p", b"{}");
        for other in [
            Stamp {
                coordinator: "cd".into(),
                ..a.clone()
            },
            Stamp {
                worker: 4,
                ..a.clone()
            },
            Stamp {
                time: 101,
                ..a.clone()
            },
            Stamp {
                nonce: "0".repeat(32),
                ..a.clone()
            },
        ] {
            assert_ne!(request_bytes(&other, "POST", "/p", b"{}"), base);
        }
        assert_eq!(request_bytes(&a, "POST", "/p", b"{}"), base);
        assert!(!nonce_well_formed("ABCDEF0123456789abcdef0123456789"));
        assert!(!nonce_well_formed("abc"));
    }
}

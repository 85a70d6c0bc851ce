//! The data directory: everything a coordinator keeps on disk.
//!
//! | file | content |
//! |---|---|
//! | `coordinator.db` (+ `-wal`, `-shm`) | the SQLite store |
//! | `coordinator.key` (0600) | Ed25519 seed, 64 hex |
//! | `coordinator.pub` | its public key, 64 hex (workers pin it) |
//! | `admin.token` (0600) | the admin bearer token, 64 hex |
//! | `listen.url` | `http://ADDR` of the running service (written by `serve`) |

use anyhow::{bail, Context, Result};
use cubehunt_common::sign;
use rand::RngCore;
use std::fs;
use std::io::Write;
use std::os::unix::fs::{OpenOptionsExt, PermissionsExt};
use std::path::{Path, PathBuf};

pub const DB_FILE: &str = "coordinator.db";
pub const KEY_FILE: &str = "coordinator.key";
pub const PUB_FILE: &str = "coordinator.pub";
pub const TOKEN_FILE: &str = "admin.token";
pub const URL_FILE: &str = "listen.url";

#[derive(Clone, Debug)]
pub struct DataDir {
    pub root: PathBuf,
}

/// What `init` made.
pub struct Initialised {
    pub dir: DataDir,
    pub public_key: String,
    pub admin_token: String,
}

impl DataDir {
    pub fn new(root: impl Into<PathBuf>) -> DataDir {
        DataDir { root: root.into() }
    }
    pub fn db(&self) -> PathBuf {
        self.root.join(DB_FILE)
    }
    pub fn path(&self, f: &str) -> PathBuf {
        self.root.join(f)
    }

    /// Create a new data directory: keys, token, and an empty store with the schema.
    /// Refuses a directory that already holds anything.
    pub async fn init(root: &Path) -> Result<Initialised> {
        if root.exists() {
            let non_empty = fs::read_dir(root)
                .with_context(|| format!("reading {}", root.display()))?
                .next()
                .is_some();
            if non_empty {
                bail!(
                    "{} already exists and is not empty; init never overwrites a data directory. Use it with `serve`, or choose a new directory",
                    root.display()
                );
            }
        } else {
            fs::create_dir_all(root).with_context(|| format!("creating {}", root.display()))?;
        }
        fs::set_permissions(root, fs::Permissions::from_mode(0o700))
            .with_context(|| format!("setting permissions of {}", root.display()))?;
        let dir = DataDir::new(root);
        let key = sign::generate();
        write_private(
            &dir.path(KEY_FILE),
            &format!("{}\n", sign::secret_to_hex(&key)),
        )?;
        let public_key = sign::public_to_hex(&key.verifying_key());
        fs::write(dir.path(PUB_FILE), format!("{public_key}\n"))?;
        let mut t = [0u8; 32];
        rand::rngs::OsRng.fill_bytes(&mut t);
        let admin_token = hex::encode(t);
        write_private(&dir.path(TOKEN_FILE), &format!("{admin_token}\n"))?;
        let store = crate::store::Store::open(&dir.db(), true)
            .await
            .context("creating the database")?;
        store.close().await;
        Ok(Initialised {
            dir,
            public_key,
            admin_token,
        })
    }

    /// Check that this is a data directory made by `init`.
    pub fn check(&self) -> Result<()> {
        self.check_for(true)
    }

    /// [`DataDir::check`], without requiring the SQLite file when the store is elsewhere
    /// (`--database postgres://…`).
    pub fn check_for(&self, sqlite: bool) -> Result<()> {
        let files: &[&str] = if sqlite {
            &[DB_FILE, KEY_FILE, TOKEN_FILE]
        } else {
            &[KEY_FILE, TOKEN_FILE]
        };
        for &f in files {
            if !self.path(f).is_file() {
                bail!("{} is not a coordinator data directory ({f} is missing); create one with `cubehunt-coordinator init --data-dir DIR`", self.root.display());
            }
        }
        Ok(())
    }

    pub fn signing_key(&self) -> Result<sign::SecretKey> {
        let p = self.path(KEY_FILE);
        let s = fs::read_to_string(&p).with_context(|| format!("reading {}", p.display()))?;
        sign::secret_from_hex(&s).map_err(|e| anyhow::anyhow!("{}: {e}", p.display()))
    }

    pub fn admin_token(&self) -> Result<String> {
        let p = self.path(TOKEN_FILE);
        let s = fs::read_to_string(&p)
            .with_context(|| format!("reading {} (pass --admin-token instead)", p.display()))?;
        Ok(s.trim().to_string())
    }

    pub fn write_url(&self, url: &str) -> Result<()> {
        fs::write(self.path(URL_FILE), format!("{url}\n")).context("writing listen.url")
    }

    pub fn url(&self) -> Result<String> {
        let p = self.path(URL_FILE);
        let s = fs::read_to_string(&p).with_context(|| {
            format!(
                "reading {}: is `serve` running on this data directory? (or pass --url)",
                p.display()
            )
        })?;
        Ok(s.trim().to_string())
    }
}

fn write_private(p: &Path, content: &str) -> Result<()> {
    let mut f = fs::OpenOptions::new()
        .write(true)
        .create_new(true)
        .mode(0o600)
        .open(p)
        .with_context(|| format!("creating {}", p.display()))?;
    f.write_all(content.as_bytes())?;
    f.sync_all()?;
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    #[tokio::test]
    async fn init_makes_private_files_and_never_overwrites() {
        let t = tempfile::tempdir().unwrap();
        let root = t.path().join("dd");
        let i = DataDir::init(&root).await.unwrap();
        let d = &i.dir;
        d.check().unwrap();
        for f in [KEY_FILE, TOKEN_FILE] {
            let mode = fs::metadata(d.path(f)).unwrap().permissions().mode() & 0o777;
            assert_eq!(mode, 0o600, "{f}");
        }
        assert_eq!(d.admin_token().unwrap(), i.admin_token);
        assert_eq!(
            sign::public_to_hex(&d.signing_key().unwrap().verifying_key()),
            i.public_key
        );
        let token_before = fs::read(d.path(TOKEN_FILE)).unwrap();
        let e = DataDir::init(&root).await.err().unwrap().to_string();
        assert!(e.contains("not empty"), "{e}");
        assert_eq!(fs::read(d.path(TOKEN_FILE)).unwrap(), token_before);
        assert!(DataDir::new(t.path()).check().is_err());
    }
}

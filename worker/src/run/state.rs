//! The worker's state directory: its key, its enrolment, the pinned coordinator key, the
//! checkpoint of the lease in progress and the reports not yet acknowledged.
//!
//! ```text
//! STATE/
//!   lock                   held (flock) while a worker runs on this directory
//!   worker.key             the worker's Ed25519 seed, 64 hex characters, mode 0600
//!   worker.json            enrolment: worker id, owner, coordinator URL, public key
//!   coordinator.key        the pinned coordinator public key, 64 hex characters
//!   lease/grant.json       the lease being worked on: the grant as received and the chunk plan
//!   lease/chunk-NNNNNN.json  one finished chunk: its rectangle, digest and solutions
//!   outbox/report-L.json   a signed report for lease L, kept until the coordinator answers
//!   refused/report-L.json  a report the coordinator refused, kept for the record
//! ```
//!
//! Every file is written atomically: a temporary file in the same directory, fsync, rename,
//! fsync of the directory. A kill at any moment leaves either the old or the new file.
//! Nothing here talks to the network or runs the kernel.

use anyhow::{bail, Context, Result};
use cubehunt_common::protocol::LeaseGrant;
use cubehunt_common::report::SignedReport;
use cubehunt_common::{sign, Digest, Rect, Solution};
use serde::{de::DeserializeOwned, Deserialize, Serialize};
use std::fs::{self, File, OpenOptions};
use std::io::Write;
use std::os::unix::fs::{OpenOptionsExt, PermissionsExt};
use std::os::unix::io::AsRawFd;
use std::path::{Path, PathBuf};

/// Largest state file we are willing to read back (a chunk with many solutions is far smaller).
const MAX_STATE_FILE: u64 = 16 * 1024 * 1024;

/// The enrolment record (`worker.json`).
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct Enrolment {
    pub worker_id: i64,
    pub owner: String,
    pub coordinator: String,
    pub public_key: String,
}

/// The lease in progress (`lease/grant.json`).
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct StoredLease {
    pub grant: LeaseGrant,
    /// The chunk plan, derived from the unit alone (kept for inspection; recomputed on resume).
    pub chunks: Vec<Rect>,
    /// Unix seconds when the lease was first received.
    pub received_at: i64,
}

/// One finished chunk (`lease/chunk-NNNNNN.json`).
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct ChunkResult {
    pub lease_id: i64,
    pub index: usize,
    pub rect: Rect,
    pub digest: Digest,
    pub solutions: Vec<Solution>,
    pub elapsed_s: f64,
}

pub struct StateDir {
    root: PathBuf,
    /// Held for the life of the process: the flock on `lock`.
    _lock: File,
}

impl StateDir {
    /// Open (creating if needed) a state directory and take its lock.
    pub fn open(root: &Path) -> Result<StateDir> {
        fs::create_dir_all(root).with_context(|| {
            format!(
                "cannot create the state directory {}: choose a writable --state-dir",
                root.display()
            )
        })?;
        for sub in ["lease", "outbox", "refused"] {
            fs::create_dir_all(root.join(sub))
                .with_context(|| format!("cannot create {}", root.join(sub).display()))?;
        }
        let lock_path = root.join("lock");
        let lock = OpenOptions::new()
            .create(true)
            .truncate(false)
            .write(true)
            .mode(0o600)
            .open(&lock_path)
            .with_context(|| format!("cannot open {}", lock_path.display()))?;
        // SAFETY: flock on a descriptor we own; no memory is involved.
        let rc = unsafe { libc::flock(lock.as_raw_fd(), libc::LOCK_EX | libc::LOCK_NB) };
        if rc != 0 {
            bail!(
                "another cubehunt-worker is already running on the state directory {} (its lock is held). \
                 Stop it first, or give this one its own --state-dir.",
                root.display()
            );
        }
        Ok(StateDir {
            root: root.to_path_buf(),
            _lock: lock,
        })
    }

    pub fn root(&self) -> &Path {
        &self.root
    }

    fn key_path(&self) -> PathBuf {
        self.root.join("worker.key")
    }

    /// The worker's signing key; made (mode 0600) on first use.
    pub fn load_or_create_key(&self) -> Result<(sign::SecretKey, bool)> {
        let p = self.key_path();
        if p.exists() {
            let meta = fs::metadata(&p)?;
            let mode = meta.permissions().mode() & 0o777;
            if mode & 0o077 != 0 {
                bail!(
                    "{} is readable by other users (mode {:o}); it is this worker's private key. \
                     Run `chmod 600 {}` and start again.",
                    p.display(),
                    mode,
                    p.display()
                );
            }
            let text = read_bounded(&p)?;
            let key = sign::secret_from_hex(std::str::from_utf8(&text).unwrap_or("")).map_err(|_| {
                anyhow::anyhow!(
                    "{} is not a key (expected 64 hex characters). Restore it from a backup, or move the \
                     state directory aside and start with a new one (the worker enrols afresh).",
                    p.display()
                )
            })?;
            return Ok((key, false));
        }
        let key = sign::generate();
        write_atomic(
            &p,
            format!("{}\n", sign::secret_to_hex(&key)).as_bytes(),
            0o600,
        )?;
        Ok((key, true))
    }

    pub fn load_enrolment(&self) -> Result<Option<Enrolment>> {
        load_json(&self.root.join("worker.json"))
    }

    pub fn save_enrolment(&self, e: &Enrolment) -> Result<()> {
        save_json(&self.root.join("worker.json"), e)
    }

    pub fn load_pinned_key(&self) -> Result<Option<String>> {
        let p = self.root.join("coordinator.key");
        if !p.exists() {
            return Ok(None);
        }
        let text = read_bounded(&p)?;
        let s = String::from_utf8_lossy(&text).trim().to_string();
        sign::public_from_hex(&s).map_err(|_| {
            anyhow::anyhow!(
                "{} does not hold a public key (expected 64 hex characters). Put back the coordinator's \
                 key, or delete the file and pass --coordinator-key HEX.",
                p.display()
            )
        })?;
        Ok(Some(s.to_ascii_lowercase()))
    }

    pub fn save_pinned_key(&self, hex_key: &str) -> Result<()> {
        write_atomic(
            &self.root.join("coordinator.key"),
            format!("{hex_key}\n").as_bytes(),
            0o644,
        )
    }

    // ---- the lease in progress -------------------------------------------------------------

    fn lease_dir(&self) -> PathBuf {
        self.root.join("lease")
    }

    pub fn load_lease(&self) -> Result<Option<StoredLease>> {
        load_json(&self.lease_dir().join("grant.json"))
    }

    /// Start a new lease: clear any leftover chunk files, then store the grant.
    pub fn begin_lease(&self, l: &StoredLease) -> Result<()> {
        self.clear_lease()?;
        save_json(&self.lease_dir().join("grant.json"), l)
    }

    fn chunk_path(&self, index: usize) -> PathBuf {
        self.lease_dir().join(format!("chunk-{index:06}.json"))
    }

    pub fn save_chunk(&self, c: &ChunkResult) -> Result<()> {
        save_json(&self.chunk_path(c.index), c)
    }

    /// Finished chunks of `lease_id` that match the plan; anything else found is ignored
    /// (and will be recomputed).
    pub fn load_chunks(&self, lease_id: i64, plan: &[Rect]) -> Result<Vec<Option<ChunkResult>>> {
        let mut out = vec![None; plan.len()];
        for (i, rect) in plan.iter().enumerate() {
            let p = self.chunk_path(i);
            if !p.exists() {
                continue;
            }
            match load_json::<ChunkResult>(&p) {
                Ok(Some(c)) if c.lease_id == lease_id && c.index == i && c.rect == *rect => {
                    out[i] = Some(c)
                }
                _ => {
                    let _ = fs::remove_file(&p);
                }
            }
        }
        Ok(out)
    }

    /// Forget the lease in progress (grant and chunks).
    pub fn clear_lease(&self) -> Result<()> {
        let dir = self.lease_dir();
        for e in fs::read_dir(&dir).with_context(|| format!("cannot list {}", dir.display()))? {
            let p = e?.path();
            if p.is_file() {
                fs::remove_file(&p).with_context(|| format!("cannot remove {}", p.display()))?;
            }
        }
        sync_dir(&dir);
        Ok(())
    }

    // ---- reports awaiting acknowledgement --------------------------------------------------

    fn outbox_path(&self, lease_id: i64) -> PathBuf {
        self.root
            .join("outbox")
            .join(format!("report-{lease_id}.json"))
    }

    pub fn save_outbox(&self, r: &SignedReport) -> Result<()> {
        save_json(&self.outbox_path(r.report.lease_id), r)
    }

    /// Reports waiting for an answer, oldest lease first.
    pub fn outbox(&self) -> Result<Vec<SignedReport>> {
        let dir = self.root.join("outbox");
        let mut names: Vec<PathBuf> = fs::read_dir(&dir)?
            .filter_map(|e| e.ok().map(|e| e.path()))
            .filter(|p| {
                p.file_name()
                    .and_then(|n| n.to_str())
                    .is_some_and(|n| n.starts_with("report-") && n.ends_with(".json"))
            })
            .collect();
        names.sort();
        let mut out = Vec::new();
        for p in names {
            match load_json::<SignedReport>(&p)? {
                Some(r) => out.push(r),
                None => continue,
            }
        }
        out.sort_by_key(|r| r.report.lease_id);
        Ok(out)
    }

    /// The coordinator answered for this report: remove it from the outbox.
    pub fn acknowledge(&self, lease_id: i64) -> Result<()> {
        let p = self.outbox_path(lease_id);
        if p.exists() {
            fs::remove_file(&p)?;
            sync_dir(&self.root.join("outbox"));
        }
        Ok(())
    }

    /// The coordinator refused this report: move it aside for the record.
    pub fn set_aside(&self, lease_id: i64) -> Result<PathBuf> {
        let from = self.outbox_path(lease_id);
        let to = self
            .root
            .join("refused")
            .join(format!("report-{lease_id}.json"));
        fs::rename(&from, &to)?;
        sync_dir(&self.root.join("refused"));
        sync_dir(&self.root.join("outbox"));
        Ok(to)
    }
}

fn read_bounded(p: &Path) -> Result<Vec<u8>> {
    let meta = fs::metadata(p).with_context(|| format!("cannot read {}", p.display()))?;
    if meta.len() > MAX_STATE_FILE {
        bail!(
            "{} is {} bytes, larger than any state file should be; it is not ours",
            p.display(),
            meta.len()
        );
    }
    fs::read(p).with_context(|| format!("cannot read {}", p.display()))
}

fn load_json<T: DeserializeOwned>(p: &Path) -> Result<Option<T>> {
    if !p.exists() {
        return Ok(None);
    }
    let b = read_bounded(p)?;
    let v = serde_json::from_slice(&b).with_context(|| {
        format!(
            "{} is damaged (not the JSON this worker writes); move it aside and start again",
            p.display()
        )
    })?;
    Ok(Some(v))
}

fn save_json<T: Serialize>(p: &Path, v: &T) -> Result<()> {
    let mut b = serde_json::to_vec_pretty(v)?;
    b.push(b'\n');
    write_atomic(p, &b, 0o600)
}

/// Write `bytes` to `path` atomically: temp file in the same directory, fsync, rename, fsync dir.
pub fn write_atomic(path: &Path, bytes: &[u8], mode: u32) -> Result<()> {
    let dir = path.parent().unwrap_or(Path::new("."));
    let name = path.file_name().and_then(|n| n.to_str()).unwrap_or("file");
    let tmp = dir.join(format!(".{name}.tmp-{}", std::process::id()));
    {
        let mut f = OpenOptions::new()
            .create(true)
            .write(true)
            .truncate(true)
            .mode(mode)
            .open(&tmp)
            .with_context(|| format!("cannot write {}", tmp.display()))?;
        f.write_all(bytes)
            .with_context(|| format!("cannot write {}", tmp.display()))?;
        f.sync_all()
            .with_context(|| format!("cannot sync {}", tmp.display()))?;
    }
    fs::rename(&tmp, path)
        .with_context(|| format!("cannot rename {} to {}", tmp.display(), path.display()))?;
    sync_dir(dir);
    Ok(())
}

fn sync_dir(dir: &Path) {
    if let Ok(d) = File::open(dir) {
        let _ = d.sync_all();
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use cubehunt_common::Region;

    #[test]
    fn key_is_private_and_stable() {
        let t = tempfile::tempdir().unwrap();
        let s = StateDir::open(t.path()).unwrap();
        let (k1, fresh) = s.load_or_create_key().unwrap();
        assert!(fresh);
        let mode = fs::metadata(t.path().join("worker.key"))
            .unwrap()
            .permissions()
            .mode()
            & 0o777;
        assert_eq!(mode, 0o600);
        let (k2, fresh2) = s.load_or_create_key().unwrap();
        assert!(!fresh2);
        assert_eq!(k1.to_bytes(), k2.to_bytes());
        fs::set_permissions(
            t.path().join("worker.key"),
            fs::Permissions::from_mode(0o644),
        )
        .unwrap();
        let e = s.load_or_create_key().unwrap_err().to_string();
        assert!(e.contains("chmod 600"), "{e}");
    }

    #[test]
    fn second_open_is_refused_while_locked() {
        let t = tempfile::tempdir().unwrap();
        let _a = StateDir::open(t.path()).unwrap();
        let e = StateDir::open(t.path())
            .err()
            .expect("lock must be exclusive")
            .to_string();
        assert!(e.contains("already running"), "{e}");
    }

    #[test]
    fn chunks_not_matching_the_plan_are_dropped() {
        let t = tempfile::tempdir().unwrap();
        let s = StateDir::open(t.path()).unwrap();
        let r = |a, b| Rect {
            region: Region::Main,
            d_lo: a,
            d_hi: b,
            z_lo: 10,
            z_hi: 100,
        };
        let plan = vec![r(1, 5), r(5, 9)];
        let c0 = ChunkResult {
            lease_id: 7,
            index: 0,
            rect: r(1, 5),
            digest: Digest::ZERO,
            solutions: vec![],
            elapsed_s: 0.1,
        };
        s.save_chunk(&c0).unwrap();
        // A chunk of another lease, and a chunk whose rectangle is not the plan's.
        s.save_chunk(&ChunkResult {
            lease_id: 8,
            index: 1,
            rect: r(5, 9),
            ..c0.clone()
        })
        .unwrap();
        let got = s.load_chunks(7, &plan).unwrap();
        assert_eq!(got[0].as_ref(), Some(&c0));
        assert!(got[1].is_none());
        assert!(!t.path().join("lease/chunk-000001.json").exists());
        let got_other_plan = s.load_chunks(7, &[r(1, 4), r(4, 9)]).unwrap();
        assert!(got_other_plan.iter().all(|c| c.is_none()));
    }
}

//! Issued certificates: written once per target and bound, served from here afterwards,
//! revoked when a unit they rest on is reopened ([`super::settle`]).

use super::{int, CertificateRow, Result, Store};
use crate::op;

impl Store {
    /// The current (not revoked) certificate of a target for a bound.
    pub async fn certificate(&self, target_id: i64, bound: u64) -> Result<Option<CertificateRow>> {
        let r = sqlx::query(
            "SELECT * FROM certificates WHERE target_id = $1 AND bound = $2 AND revoked_at IS NULL",
        )
        .bind(target_id)
        .bind(int(bound))
        .fetch_optional(self.pool())
        .await?;
        r.as_ref().map(CertificateRow::from_row).transpose()
    }

    /// Every certificate of a target, revoked ones too, oldest first.
    pub async fn certificates(&self, target_id: i64) -> Result<Vec<CertificateRow>> {
        let rows = sqlx::query("SELECT * FROM certificates WHERE target_id = $1 ORDER BY id")
            .bind(target_id)
            .fetch_all(self.pool())
            .await?;
        rows.iter().map(CertificateRow::from_row).collect()
    }

    /// Keep an issued certificate, unless one for the same target and bound is already
    /// current (then that one is returned: a certificate is issued once).
    pub async fn keep_certificate(
        &self,
        target_id: i64,
        bound: u64,
        root: &str,
        document: &str,
        issued_at: i64,
    ) -> Result<CertificateRow> {
        let (root, document) = (root.to_string(), document.to_string());
        self.write(op!(|c| {
            let current = sqlx::query(
                "SELECT * FROM certificates WHERE target_id = $1 AND bound = $2 AND revoked_at IS NULL",
            )
            .bind(target_id)
            .bind(int(bound))
            .fetch_optional(&mut *c)
            .await?;
            if let Some(r) = current {
                return CertificateRow::from_row(&r);
            }
            let r = sqlx::query(
                "INSERT INTO certificates (target_id, bound, issued_at, root, document) VALUES ($1, $2, $3, $4, $5) RETURNING *",
            )
            .bind(target_id)
            .bind(int(bound))
            .bind(issued_at)
            .bind(&root)
            .bind(&document)
            .fetch_one(&mut *c)
            .await?;
            CertificateRow::from_row(&r)
        }))
        .await
    }
}

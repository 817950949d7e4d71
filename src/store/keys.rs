//! API keys: creation, lookup by id, listing, revocation.

use super::{Audit, Store, StoreError, audit};
use crate::auth::{KeyInfo, NewKey, Role};

/// A key found by id, with its stored hash, for verification.
#[derive(Debug, Clone)]
pub struct StoredKey {
    pub info: KeyInfo,
    pub secret_sha256: Vec<u8>,
}

type KeyRow = (String, String, String, Vec<u8>, String, Option<String>);

impl Store {
    /// Stores a new key (only the hash of its secret) and audits it.
    pub async fn create_key(
        &self,
        key: &NewKey,
        name: &str,
        role: Role,
        gauges: &[String],
    ) -> Result<KeyInfo, StoreError> {
        let now = super::time::now_text();
        let (_writer, mut tx) = self.begin_write().await?;
        sqlx::query(
            "INSERT INTO api_keys (id, name, role, secret_sha256, created_at)
             VALUES (?1, ?2, ?3, ?4, ?5)",
        )
        .bind(&key.id)
        .bind(name)
        .bind(role.as_str())
        .bind(key.secret_hash.as_slice())
        .bind(&now)
        .execute(&mut *tx)
        .await?;
        for g in gauges {
            sqlx::query("INSERT OR IGNORE INTO api_key_gauges (key_id, gauge_id) VALUES (?1, ?2)")
                .bind(&key.id)
                .bind(g)
                .execute(&mut *tx)
                .await?;
        }
        audit::record(
            &mut tx,
            &Audit {
                key_id: None,
                action: "key.create".to_owned(),
                target: format!("key:{}", key.id),
                summary: serde_json::json!({"name": name, "role": role.as_str(), "gauges": gauges}),
            },
        )
        .await?;
        self.commit(tx).await?;
        let mut gauges = gauges.to_vec();
        gauges.sort();
        gauges.dedup();
        Ok(KeyInfo {
            id: key.id.clone(),
            name: name.to_owned(),
            role,
            gauges,
            created_at: now,
            revoked_at: None,
        })
    }

    /// The key with this id, revoked or not.
    pub async fn find_key(&self, id: &str) -> Result<Option<StoredKey>, StoreError> {
        let row: Option<KeyRow> = sqlx::query_as(
            "SELECT id, name, role, secret_sha256, created_at, revoked_at
             FROM api_keys WHERE id = ?1",
        )
        .bind(id)
        .fetch_optional(&self.pool)
        .await?;
        let Some(row) = row else { return Ok(None) };
        let gauges: Vec<(String,)> = sqlx::query_as(
            "SELECT gauge_id FROM api_key_gauges WHERE key_id = ?1 ORDER BY gauge_id",
        )
        .bind(id)
        .fetch_all(&self.pool)
        .await?;
        let (info, hash) = key_info(row, gauges.into_iter().map(|(g,)| g).collect())?;
        Ok(Some(StoredKey {
            info,
            secret_sha256: hash,
        }))
    }

    /// Every key, oldest first, without secrets.
    pub async fn list_keys(&self) -> Result<Vec<KeyInfo>, StoreError> {
        let rows: Vec<KeyRow> = sqlx::query_as(
            "SELECT id, name, role, secret_sha256, created_at, revoked_at
             FROM api_keys ORDER BY created_at, id",
        )
        .fetch_all(&self.pool)
        .await?;
        let links: Vec<(String, String)> =
            sqlx::query_as("SELECT key_id, gauge_id FROM api_key_gauges ORDER BY key_id, gauge_id")
                .fetch_all(&self.pool)
                .await?;
        rows.into_iter()
            .map(|row| {
                let gauges = links
                    .iter()
                    .filter(|(k, _)| *k == row.0)
                    .map(|(_, g)| g.clone())
                    .collect();
                key_info(row, gauges).map(|(info, _)| info)
            })
            .collect()
    }

    /// Revokes a key; `false` when no such key exists. Revoking twice keeps
    /// the first time.
    pub async fn revoke_key(&self, id: &str) -> Result<bool, StoreError> {
        let (_writer, mut tx) = self.begin_write().await?;
        let done =
            sqlx::query("UPDATE api_keys SET revoked_at = coalesce(revoked_at, ?2) WHERE id = ?1")
                .bind(id)
                .bind(super::time::now_text())
                .execute(&mut *tx)
                .await?
                .rows_affected()
                == 1;
        if done {
            audit::record(
                &mut tx,
                &Audit {
                    key_id: None,
                    action: "key.revoke".to_owned(),
                    target: format!("key:{id}"),
                    summary: serde_json::json!({}),
                },
            )
            .await?;
        }
        self.commit(tx).await?;
        Ok(done)
    }
}

fn key_info(row: KeyRow, gauges: Vec<String>) -> Result<(KeyInfo, Vec<u8>), StoreError> {
    let (id, name, role, hash, created_at, revoked_at) = row;
    let role: Role = role
        .parse()
        .map_err(|e: String| StoreError::Corrupt(format!("api_keys.role: {e}")))?;
    Ok((
        KeyInfo {
            id,
            name,
            role,
            gauges,
            created_at,
            revoked_at,
        },
        hash,
    ))
}

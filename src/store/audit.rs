//! The audit log: one row per write, in the same transaction as the write.

use sqlx::SqliteConnection;

use super::{Store, StoreError};

/// What is recorded about a write.
#[derive(Debug, Clone)]
pub struct Audit {
    /// The API key that made the write; `None` for the command line and
    /// for the service's own writes (`record_system`).
    pub key_id: Option<String>,
    pub action: String,
    pub target: String,
    /// Summary counts or fields, as JSON.
    pub summary: serde_json::Value,
}

/// A stored audit entry.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct AuditEntry {
    pub id: i64,
    pub at: String,
    pub key_id: Option<String>,
    pub actor: String,
    pub action: String,
    pub target: String,
    pub summary: serde_json::Value,
}

type AuditRow = (i64, String, Option<String>, String, String, String, String);

pub(super) async fn record(conn: &mut SqliteConnection, audit: &Audit) -> Result<(), StoreError> {
    let actor = match &audit.key_id {
        Some(id) => format!("key:{id}"),
        None => "cli".to_owned(),
    };
    insert(conn, audit, &actor).await
}

/// Records a write the service made on its own, with no key and no
/// command line behind it (CAP messages issued after a forecast run, say):
/// `key_id` must be `None`, and the actor is `system:{component}`.
pub(super) async fn record_system(
    conn: &mut SqliteConnection,
    component: &str,
    audit: &Audit,
) -> Result<(), StoreError> {
    debug_assert!(audit.key_id.is_none(), "a system write has no key");
    insert(conn, audit, &format!("system:{component}")).await
}

async fn insert(conn: &mut SqliteConnection, audit: &Audit, actor: &str) -> Result<(), StoreError> {
    sqlx::query(
        "INSERT INTO audit_log (at, key_id, actor, action, target, summary)
         VALUES (?1, ?2, ?3, ?4, ?5, ?6)",
    )
    .bind(super::time::now_text())
    .bind(&audit.key_id)
    .bind(actor)
    .bind(&audit.action)
    .bind(&audit.target)
    .bind(audit.summary.to_string())
    .execute(conn)
    .await?;
    Ok(())
}

impl Store {
    /// The newest audit entries, newest first.
    pub async fn audit_log(&self, limit: i64) -> Result<Vec<AuditEntry>, StoreError> {
        let rows: Vec<AuditRow> = sqlx::query_as(
            "SELECT id, at, key_id, actor, action, target, summary
                 FROM audit_log ORDER BY id DESC LIMIT ?1",
        )
        .bind(limit)
        .fetch_all(&self.pool)
        .await?;
        rows.into_iter()
            .map(|(id, at, key_id, actor, action, target, summary)| {
                let summary = serde_json::from_str(&summary)
                    .map_err(|e| StoreError::Corrupt(format!("audit summary: {e}")))?;
                Ok(AuditEntry {
                    id,
                    at,
                    key_id,
                    actor,
                    action,
                    target,
                    summary,
                })
            })
            .collect()
    }
}

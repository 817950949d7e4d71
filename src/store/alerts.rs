//! CAP messages issued from forecast runs (table `cap_messages`, migration
//! 0003): the open message chains the next plan compares against, the
//! messages that are current for the Atom index, and the documents.

use chrono::{DateTime, Utc};
use sqlx::Row;

use super::{Audit, Store, StoreError, audit, time};
use crate::forecast::cap::{self, Issued, Key, Material, MsgType};

/// A planned and rendered message, ready to store.
#[derive(Debug, Clone, PartialEq)]
pub struct NewCapMessage {
    /// What the next plan needs (`Planned::to_issued`).
    pub issued: Issued,
    /// CAP `expires` as rendered.
    pub expires: DateTime<Utc>,
    /// The CAP XML document.
    pub document: String,
    /// Atom entry title and summary (`FeedEntry::for_message`).
    pub title: String,
    pub summary: String,
    /// The run that caused the message.
    pub run_id: i64,
}

/// A stored message as the Atom index lists it.
#[derive(Debug, Clone, PartialEq)]
pub struct CapEntry {
    pub identifier: String,
    pub reach_id: String,
    pub msg_type: MsgType,
    pub sent: DateTime<Utc>,
    pub expires: DateTime<Utc>,
    pub title: String,
    pub summary: String,
}

/// The messages a feed lists and the instant the list last changed.
#[derive(Debug, Clone, PartialEq)]
pub struct CurrentCap {
    pub entries: Vec<CapEntry>,
    /// The newest `sent`, or the latest expiry (up to now) of a `Cancel`
    /// that has left the list; `None` when nothing was ever issued.
    pub updated: Option<DateTime<Utc>>,
}

/// An issued message with its stored expiry, for the next plan.
#[derive(Debug, Clone, PartialEq)]
pub struct OpenMessage {
    pub issued: Issued,
    pub expires: DateTime<Utc>,
}

/// `reach/point/level`, each part with `%` and `/` percent-encoded, so
/// that the text identifies the key unambiguously.
pub fn key_text(key: &Key) -> String {
    let enc = |s: &str| s.replace('%', "%25").replace('/', "%2F");
    format!(
        "{}/{}/{}",
        enc(&key.reach),
        enc(&key.point),
        enc(&key.level)
    )
}

fn msg_type_of(text: &str) -> Result<MsgType, StoreError> {
    match text {
        "Alert" => Ok(MsgType::Alert),
        "Update" => Ok(MsgType::Update),
        "Cancel" => Ok(MsgType::Cancel),
        other => Err(StoreError::Corrupt(format!(
            "cap_messages.msg_type `{other}`"
        ))),
    }
}

/// An audit entry of the alerting step (actor `system:alerts`), in the
/// transaction of the write it explains.
async fn audit_alerts(
    conn: &mut sqlx::SqliteConnection,
    action: &str,
    target: String,
    summary: serde_json::Value,
) -> Result<(), StoreError> {
    let entry = Audit {
        key_id: None,
        action: action.to_owned(),
        target,
        summary,
    };
    audit::record_system(conn, "alerts", &entry).await
}

impl Store {
    /// For each (point, level) of `reach_id`: the messages since its
    /// last `Cancel`, that `Cancel` included, oldest first, ties in `sent`
    /// broken by run. Older, closed chains are left out: the plan needs only
    /// the open chain (and whether one is open).
    pub async fn cap_open_chains(&self, reach_id: &str) -> Result<Vec<OpenMessage>, StoreError> {
        let rows = sqlx::query(
            "SELECT m.identifier, m.reach_id, m.point_id, m.level_id, m.sender,
                    m.sent, m.expires, m.msg_type, m.active, m.material
             FROM cap_messages m
             WHERE m.reach_id = ?1
               AND NOT EXISTS (
                   SELECT 1 FROM cap_messages c
                   WHERE c.reach_id = m.reach_id AND c.key = m.key AND c.active = 0
                     AND (c.sent > m.sent OR (c.sent = m.sent AND c.run_id > m.run_id)))
             ORDER BY m.sent, m.run_id",
        )
        .bind(reach_id)
        .fetch_all(&self.pool)
        .await?;
        rows.iter()
            .map(|row| {
                let sent: String = row.try_get("sent")?;
                let expires: String = row.try_get("expires")?;
                let msg_type: String = row.try_get("msg_type")?;
                let active: i64 = row.try_get("active")?;
                let material: Option<String> = row.try_get("material")?;
                let material = material
                    .map(|m| serde_json::from_str::<Material>(&m))
                    .transpose()
                    .map_err(|e| StoreError::Corrupt(format!("cap_messages.material: {e}")))?;
                Ok(OpenMessage {
                    issued: Issued {
                        key: Key {
                            reach: row.try_get("reach_id")?,
                            point: row.try_get("point_id")?,
                            level: row.try_get("level_id")?,
                        },
                        identifier: row.try_get("identifier")?,
                        sender: row.try_get("sender")?,
                        sent: time::read("cap_messages.sent", &sent)?,
                        msg_type: msg_type_of(&msg_type)?,
                        active: active != 0,
                        material,
                    },
                    expires: time::read("cap_messages.expires", &expires)?,
                })
            })
            .collect()
    }

    /// Rewrites the key of every message of `reach_id` stored under each
    /// old key to the new one (all or none, audited as `cap.rekey`): a
    /// chain keyed by display names before keys were ids goes on under its
    /// ids.
    pub async fn rekey_cap_chains(
        &self,
        reach_id: &str,
        renames: &[(Key, Key)],
    ) -> Result<(), StoreError> {
        let (_guard, mut tx) = self.begin_write().await?;
        for (old, new) in renames {
            sqlx::query(
                "UPDATE cap_messages SET key = ?3, point_id = ?4, level_id = ?5
                 WHERE reach_id = ?1 AND key = ?2",
            )
            .bind(reach_id)
            .bind(key_text(old))
            .bind(key_text(new))
            .bind(&new.point)
            .bind(&new.level)
            .execute(&mut *tx)
            .await?;
            audit_alerts(
                &mut tx,
                "cap.rekey",
                format!("reach:{reach_id}"),
                serde_json::json!({"from": key_text(old), "to": key_text(new)}),
            )
            .await?;
        }
        self.commit(tx).await?;
        Ok(())
    }

    /// Stores the messages of one plan, all or none, each with its audit
    /// entry (`cap.issue`, actor `system:alerts`) in the same transaction.
    pub async fn insert_cap_messages(&self, msgs: &[NewCapMessage]) -> Result<(), StoreError> {
        let r = async {
            if msgs.is_empty() {
                return Ok(());
            }
            let (_guard, mut tx) = self.begin_write().await?;
            for m in msgs {
                let i = &m.issued;
                let material = i
                    .material
                    .as_ref()
                    .map(serde_json::to_string)
                    .transpose()
                    .map_err(|e| StoreError::Corrupt(format!("cap material: {e}")))?;
                sqlx::query(
                    "INSERT INTO cap_messages (identifier, reach_id, key, point_id, level_id,
                     sender, sent, expires, msg_type, active, material, document, title,
                     summary, run_id)
                 VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13, ?14, ?15)",
                )
                .bind(&i.identifier)
                .bind(&i.key.reach)
                .bind(key_text(&i.key))
                .bind(&i.key.point)
                .bind(&i.key.level)
                .bind(&i.sender)
                .bind(cap::cap_time(i.sent))
                .bind(cap::cap_time(m.expires))
                .bind(i.msg_type.cap_value())
                .bind(i64::from(i.active))
                .bind(material)
                .bind(&m.document)
                .bind(&m.title)
                .bind(&m.summary)
                .bind(m.run_id)
                .execute(&mut *tx)
                .await?;
                audit_alerts(
                    &mut tx,
                    "cap.issue",
                    format!("cap:{}", i.identifier),
                    serde_json::json!({
                        "msg_type": i.msg_type.cap_value(),
                        "reach": i.key.reach,
                        "point": i.key.point,
                        "level": i.key.level,
                        "run_id": m.run_id,
                    }),
                )
                .await?;
            }
            self.commit(tx).await?;
            Ok(())
        }
        .await;
        self.watched(r)
    }

    /// The current messages of one reach, or of all with `None`: for each
    /// (reach, point, level) its newest message, if that is an `Alert`
    /// or `Update` (the chain is open: it is the current statement), or a
    /// `Cancel` that has not yet expired at `now` (so that consumers polling
    /// the index see the chain end). Newest first.
    pub async fn current_cap_messages(
        &self,
        reach_id: Option<&str>,
        now: DateTime<Utc>,
    ) -> Result<CurrentCap, StoreError> {
        let now = cap::cap_time(now);
        let rows = sqlx::query(
            "SELECT identifier, reach_id, msg_type, sent, expires, title, summary FROM (
                 SELECT identifier, reach_id, msg_type, sent, expires, title, summary, active,
                        ROW_NUMBER() OVER (
                            PARTITION BY reach_id, key ORDER BY sent DESC, run_id DESC) AS newest
                 FROM cap_messages
                 WHERE ?1 IS NULL OR reach_id = ?1)
             WHERE newest = 1 AND (active = 1 OR expires > ?2)
             ORDER BY sent DESC, identifier",
        )
        .bind(reach_id)
        .bind(&now)
        .fetch_all(&self.pool)
        .await?;
        let entries = rows
            .iter()
            .map(|row| {
                let sent: String = row.try_get("sent")?;
                let expires: String = row.try_get("expires")?;
                let msg_type: String = row.try_get("msg_type")?;
                Ok(CapEntry {
                    identifier: row.try_get("identifier")?,
                    reach_id: row.try_get("reach_id")?,
                    msg_type: msg_type_of(&msg_type)?,
                    sent: time::read("cap_messages.sent", &sent)?,
                    expires: time::read("cap_messages.expires", &expires)?,
                    title: row.try_get("title")?,
                    summary: row.try_get("summary")?,
                })
            })
            .collect::<Result<Vec<_>, StoreError>>()?;
        let (updated,): (Option<String>,) = sqlx::query_as(
            "SELECT MAX(t) FROM (
                 SELECT sent AS t FROM cap_messages WHERE ?1 IS NULL OR reach_id = ?1
                 UNION ALL
                 SELECT expires FROM cap_messages
                 WHERE (?1 IS NULL OR reach_id = ?1) AND active = 0 AND expires <= ?2)",
        )
        .bind(reach_id)
        .bind(&now)
        .fetch_one(&self.pool)
        .await?;
        Ok(CurrentCap {
            entries,
            updated: updated
                .map(|t| time::read("cap_messages.sent", &t))
                .transpose()?,
        })
    }

    /// The stored CAP document of a message.
    pub async fn cap_document(&self, identifier: &str) -> Result<Option<String>, StoreError> {
        let row: Option<(String,)> =
            sqlx::query_as("SELECT document FROM cap_messages WHERE identifier = ?1")
                .bind(identifier)
                .fetch_optional(&self.pool)
                .await?;
        Ok(row.map(|(d,)| d))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn key_text_is_unambiguous() {
        let a = Key {
            reach: "r".into(),
            point: "Mill/Ford".into(),
            level: "t".into(),
        };
        let b = Key {
            reach: "r".into(),
            point: "Mill".into(),
            level: "Ford/t".into(),
        };
        assert_eq!(key_text(&a), "r/Mill%2FFord/t");
        assert_ne!(key_text(&a), key_text(&b));
        let c = Key {
            reach: "r".into(),
            point: "50%".into(),
            level: "x".into(),
        };
        assert_eq!(key_text(&c), "r/50%25/x");
    }
}

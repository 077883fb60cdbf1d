//! The chain key and the published head, for every unit of work that appends events:
//! [`open_writer`] opens the database with the key loaded (created at the first start of
//! a chain that has none), [`publish_head`] rewrites the witness file after a commit.

use std::path::Path;

use super::error::{NotebookError, Result};
use crate::audit::key::{self, KeyError};
use crate::config::Config;
use crate::model::chain::{ChainKey, GENESIS, event_hash};
use crate::model::time::now_utc;
use crate::store::{self, Connection};

impl From<KeyError> for NotebookError {
    fn from(e: KeyError) -> Self {
        NotebookError::Refused(e.to_string())
    }
}

/// Whether a chain without a `chain_keying` row was nonetheless written under a key: its
/// first event's link is not the plain one.
fn first_link_is_keyed(conn: &Connection) -> Result<bool> {
    let mut first = None;
    store::replay::for_each_event(conn, |e| {
        first = Some(e);
        Ok(false)
    })?;
    Ok(first.is_some_and(|e| {
        e.prev_hash != GENESIS
            || e.hash
                != event_hash(
                    &e.prev_hash,
                    e.seq,
                    &e.at,
                    &e.actor,
                    &e.kind,
                    &e.subject,
                    &e.payload,
                )
    }))
}

/// The key for `conn`'s chain: loaded from its file, or created there when the chain is
/// not keyed yet. A keyed chain whose key file is missing is refused, never re-keyed.
fn key_for_writing(cfg: &Config, conn: &Connection) -> Result<ChainKey> {
    let path = cfg.chain_key_path();
    if let Some(k) = key::load(&path)? {
        return Ok(k);
    }
    if store::events::keying(conn)?.is_some() || first_link_is_keyed(conn)? {
        return Err(NotebookError::Refused(format!(
            "the audit chain is keyed but its key file {} is missing; restore it (nothing \
             was written)",
            path.display()
        )));
    }
    Ok(key::create(&path)?)
}

/// Open the database for a unit of work that appends events, with the chain key loaded;
/// a chain still plain is keyed now (see [`store::events::start_keying`]).
pub(crate) fn open_writer(cfg: &Config) -> Result<Connection> {
    let mut conn = store::open(&cfg.database_path())?;
    if let Some(site) = cfg.site_id() {
        store::site::use_site(&conn, site);
    }
    let key = key_for_writing(cfg, &conn)?;
    if store::events::keying(&conn)?.is_none() {
        let actor = crate::audit::actor(cfg.actor.as_deref());
        let tx = store::immediate(&mut conn)?;
        if store::events::keying(&tx)?.is_none() {
            let seq = store::events::start_keying(&tx, &key, &now_utc(), &actor)?;
            tracing::info!(switch_seq = seq, "audit chain keyed");
        }
        tx.commit().map_err(store::StoreError::from)?;
        publish_head(cfg, &conn)?;
    }
    store::events::use_key(&conn, key);
    Ok(conn)
}

/// Publish the chain's newest event in the witness file (nothing while the chain is empty).
pub(crate) fn publish_head(cfg: &Config, conn: &Connection) -> Result<()> {
    if let Some(h) = store::events::head(conn)? {
        key::publish_head(&cfg.head_witness_path(), &h)?;
    }
    Ok(())
}

/// The key `verify` checks keyed links with, if its file exists (never created here).
pub(crate) fn key_for_checking(cfg: &Config) -> Result<Option<ChainKey>> {
    Ok(key::load(&cfg.chain_key_path())?)
}

/// The head published in the witness file, if there is one.
pub(crate) fn witnessed_head(path: &Path) -> Result<Option<crate::model::chain::Head>> {
    Ok(key::read_head(path)?)
}

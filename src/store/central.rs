//! The company's central store in PostgreSQL, and the local side of shipping to it: the
//! site stamp on new events, and the read-only reading of events to ship.
//!
//! Every statement sent to PostgreSQL is here. The central schema (`central.sql`) is made
//! idempotently by whichever shipper connects first; events are keyed by (site, seq) and
//! inserted with `ON CONFLICT DO NOTHING`, so a repeat, a retry after a lost connection or
//! two shippers at once insert each event exactly once.

use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::time::Duration;

use rusqlite::{Connection, OpenFlags};
use tokio_postgres::Client;
use tokio_postgres::config::SslMode;

use super::replay::StoredEvent;
use crate::model::chain::Head;

/// Errors of the central store. Messages never hold the password or the URL.
#[derive(Debug, thiserror::Error)]
pub enum CentralError {
    #[error("central store: {}", with_cause(.0))]
    Postgres(#[from] tokio_postgres::Error),
    #[error("central store address is not valid: {0}")]
    Address(String),
    #[error("central store TLS: {0}")]
    Tls(String),
    #[error("local database: {0}")]
    Local(#[from] rusqlite::Error),
}

pub type Result<T> = std::result::Result<T, CentralError>;

/// The client's error with its cause ("error connecting to server: Connection refused"),
/// which its own message leaves out. Neither names the password.
fn with_cause(e: &tokio_postgres::Error) -> String {
    let text = e.to_string();
    match std::error::Error::source(e).map(ToString::to_string) {
        Some(cause) if !text.contains(&cause) => format!("{text}: {cause}"),
        _ => text,
    }
}

/// Where the central store is and how to log in. Debug shows neither URL nor password.
#[derive(Clone)]
pub struct Target {
    pub url: String,
    pub password: Option<String>,
    pub ca_file: Option<PathBuf>,
}

impl std::fmt::Debug for Target {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str("Target(<redacted>)")
    }
}

/// Connect; TLS (rustls, server certificate checked) only when the URL says
/// `sslmode=require`, plain otherwise.
pub async fn connect(t: &Target) -> Result<Client> {
    let mut pg: tokio_postgres::Config = t
        .url
        .parse()
        .map_err(|e: tokio_postgres::Error| CentralError::Address(e.to_string()))?;
    if let Some(p) = &t.password {
        pg.password(p.as_bytes());
    }
    pg.connect_timeout(Duration::from_secs(10));
    pg.application_name("turnbook");
    if pg.get_ssl_mode() == SslMode::Require {
        let tls = tls_connector(t.ca_file.as_deref())?;
        let (client, conn) = pg.connect(tls).await?;
        tokio::spawn(drive(conn));
        Ok(client)
    } else {
        pg.ssl_mode(SslMode::Disable);
        let (client, conn) = pg.connect(tokio_postgres::NoTls).await?;
        tokio::spawn(drive(conn));
        Ok(client)
    }
}

/// Run a connection's protocol until it ends; its end shows as an error on the client.
async fn drive<F: std::future::Future<Output = std::result::Result<(), tokio_postgres::Error>>>(
    conn: F,
) {
    if let Err(e) = conn.await {
        tracing::debug!(error = %e, "central store connection ended");
    }
}

fn tls_connector(ca_file: Option<&Path>) -> Result<tokio_postgres_rustls::MakeRustlsConnect> {
    use rustls::pki_types::CertificateDer;
    use rustls::pki_types::pem::PemObject;
    let mut roots = rustls::RootCertStore::empty();
    match ca_file {
        Some(path) => {
            let certs = CertificateDer::pem_file_iter(path)
                .map_err(|e| CentralError::Tls(format!("{}: {e}", path.display())))?;
            for c in certs {
                let c = c.map_err(|e| CentralError::Tls(format!("{}: {e}", path.display())))?;
                roots
                    .add(c)
                    .map_err(|e| CentralError::Tls(format!("{}: {e}", path.display())))?;
            }
        }
        None => roots.extend(webpki_roots::TLS_SERVER_ROOTS.iter().cloned()),
    }
    let provider = Arc::new(rustls::crypto::ring::default_provider());
    let config = rustls::ClientConfig::builder_with_provider(provider)
        .with_safe_default_protocol_versions()
        .map_err(|e| CentralError::Tls(e.to_string()))?
        .with_root_certificates(roots)
        .with_no_client_auth();
    Ok(tokio_postgres_rustls::MakeRustlsConnect::new(config))
}

/// Any fixed number: the advisory lock under which the schema is made.
const SCHEMA_LOCK: i64 = 0x7475_726e_626b;

/// The central schema and views, as this build makes them.
const SCHEMA_SQL: &str = include_str!("central.sql");

/// How long making the schema may wait for a lock before it gives up (the shipper retries
/// with backoff). Even `CREATE INDEX IF NOT EXISTS` on an index that exists takes a share
/// lock on the events table, so it waits for every site's open batch, and every batch
/// asked for after it queues behind it; a batch that waits (outside the server's sight)
/// for its predecessor on another connection would then hold everyone until that
/// connection's own lock timeout. Giving up soon breaks the wait instead.
const SCHEMA_LOCK_TIMEOUT: &str = "5s";

/// SHA-256 of [`SCHEMA_SQL`]: the text the store was last brought up to is recorded, so a
/// connection that finds its own text recorded makes no DDL at all.
fn schema_digest() -> String {
    use sha2::{Digest, Sha256};
    hex::encode(Sha256::digest(SCHEMA_SQL.as_bytes()))
}

/// The digest of the schema text the store was last brought up to; None for a store that
/// has no schema yet (or one made before digests were recorded).
async fn applied_digest(client: &impl tokio_postgres::GenericClient) -> Result<Option<String>> {
    let row = client
        .query_one(
            "SELECT to_regclass('turnbook.schema_applied') IS NOT NULL",
            &[],
        )
        .await?;
    if !row.get::<_, bool>(0) {
        return Ok(None);
    }
    let row = client
        .query_opt("SELECT digest FROM turnbook.schema_applied", &[])
        .await?;
    Ok(row.map(|r| r.get(0)))
}

/// Make the central schema and views if they are missing or were made by another text of
/// them (idempotent, one connection at a time). A store already brought up to this text
/// is only read: no lock is taken, so connecting never waits for another site's batches.
pub async fn prepare(client: &mut Client) -> Result<()> {
    let digest = schema_digest();
    if applied_digest(client).await?.as_deref() == Some(digest.as_str()) {
        return Ok(());
    }
    let tx = client.transaction().await?;
    tx.batch_execute(&format!("SET LOCAL lock_timeout = '{SCHEMA_LOCK_TIMEOUT}'"))
        .await?;
    tx.execute("SELECT pg_advisory_xact_lock($1)", &[&SCHEMA_LOCK])
        .await?;
    // Another connection may have made it while this one waited for the advisory lock.
    if applied_digest(&tx).await?.as_deref() == Some(digest.as_str()) {
        tx.commit().await?;
        return Ok(());
    }
    tx.batch_execute(SCHEMA_SQL).await?;
    tx.execute(
        "INSERT INTO turnbook.schema_applied (one, digest) VALUES (true, $1)
         ON CONFLICT (one) DO UPDATE SET digest = EXCLUDED.digest, applied_at = now()",
        &[&digest],
    )
    .await?;
    tx.commit().await?;
    Ok(())
}

/// Record the site (and its time zone) if it is new.
pub async fn register_site(client: &Client, site: &str, time_zone: Option<&str>) -> Result<()> {
    client
        .execute(
            "INSERT INTO turnbook.sites (site, time_zone) VALUES ($1, $2)
             ON CONFLICT (site) DO UPDATE SET time_zone = EXCLUDED.time_zone
             WHERE turnbook.sites.time_zone IS DISTINCT FROM EXCLUDED.time_zone",
            &[&site, &time_zone],
        )
        .await?;
    Ok(())
}

/// The site's newest event in the central store.
pub async fn head(client: &Client, site: &str) -> Result<Option<Head>> {
    let row = client
        .query_opt(
            "SELECT seq, hash FROM turnbook.events WHERE site = $1 ORDER BY seq DESC LIMIT 1",
            &[&site],
        )
        .await?;
    Ok(row.map(|r| Head {
        seq: r.get(0),
        hash: r.get(1),
    }))
}

/// One central event's identity, for naming it.
#[derive(Debug, Clone)]
pub struct CentralEventInfo {
    pub hash: String,
    pub kind: String,
    pub at: String,
    pub subject: String,
}

/// The site's event `seq` in the central store.
pub async fn event_info(client: &Client, site: &str, seq: i64) -> Result<Option<CentralEventInfo>> {
    let row = client
        .query_opt(
            "SELECT hash, kind, at, subject FROM turnbook.events WHERE site = $1 AND seq = $2",
            &[&site, &seq],
        )
        .await?;
    Ok(row.map(|r| CentralEventInfo {
        hash: r.get(0),
        kind: r.get(1),
        at: r.get(2),
        subject: r.get(3),
    }))
}

/// Make a connection ready to write batches: a wait for another transaction's rows (two
/// shippers of one site at once) ends in an error after a minute rather than never, since
/// a batch also waits, outside the server's sight, for the batch before it to commit.
pub async fn prepare_writer(client: &Client) -> Result<()> {
    client.batch_execute("SET lock_timeout = '60s'").await?;
    Ok(())
}

/// Write a batch of the site's events in a transaction of its own, and commit it once
/// `turn` says the batch before it is committed (true), or roll it back (false: None).
/// Returns how many events were new.
pub async fn write_batch(
    client: &mut Client,
    site: &str,
    events: &[StoredEvent],
    turn: impl std::future::Future<Output = bool>,
) -> Result<Option<u64>> {
    let mut tx = client.transaction().await?;
    let n = write_events(&mut tx, site, events).await?;
    if !turn.await {
        tx.rollback().await?;
        return Ok(None);
    }
    tx.commit().await?;
    Ok(Some(n))
}

/// Insert a batch of the site's events in `tx`; events the store holds already are left as
/// they are. Returns how many were new. The batch is copied straight into the table
/// (binary COPY, the server's quickest path); should any of its events be there already
/// (another shipper was quicker), the copy is undone and the batch inserted row by row
/// with `ON CONFLICT DO NOTHING` instead, so a repeat inserts nothing.
async fn write_events(
    tx: &mut tokio_postgres::Transaction<'_>,
    site: &str,
    events: &[StoredEvent],
) -> Result<u64> {
    if events.is_empty() {
        return Ok(0);
    }
    let attempt = tx.transaction().await?;
    match copy_events(&attempt, site, events).await {
        Ok(n) => {
            attempt.commit().await?;
            Ok(n)
        }
        Err(CentralError::Postgres(e))
            if e.code() == Some(&tokio_postgres::error::SqlState::UNIQUE_VIOLATION) =>
        {
            attempt.rollback().await?;
            insert_events(tx, site, events).await
        }
        Err(e) => Err(e),
    }
}

/// Binary COPY of the batch into `turnbook.events` (fails on an event held already).
async fn copy_events(
    tx: &tokio_postgres::Transaction<'_>,
    site: &str,
    events: &[StoredEvent],
) -> Result<u64> {
    use tokio_postgres::binary_copy::BinaryCopyInWriter;
    use tokio_postgres::types::Type;
    let sink = tx
        .copy_in(
            "COPY turnbook.events (site, seq, at, actor, kind, subject, payload, prev_hash, hash)
             FROM STDIN (FORMAT binary)",
        )
        .await?;
    let types = [
        Type::TEXT,
        Type::INT8,
        Type::TEXT,
        Type::TEXT,
        Type::TEXT,
        Type::TEXT,
        Type::TEXT,
        Type::TEXT,
        Type::TEXT,
    ];
    let mut writer = std::pin::pin!(BinaryCopyInWriter::new(sink, &types));
    for e in events {
        writer
            .as_mut()
            .write(&[
                &site,
                &e.seq,
                &e.at,
                &e.actor,
                &e.kind,
                &e.subject,
                &e.payload,
                &e.prev_hash,
                &e.hash,
            ])
            .await?;
    }
    Ok(writer.finish().await?)
}

/// The batch as one multi-row insert that skips events held already.
async fn insert_events(
    tx: &tokio_postgres::Transaction<'_>,
    site: &str,
    events: &[StoredEvent],
) -> Result<u64> {
    let seq: Vec<i64> = events.iter().map(|e| e.seq).collect();
    let col = |f: fn(&StoredEvent) -> &str| events.iter().map(f).collect::<Vec<&str>>();
    let (at, actor, kind) = (col(|e| &e.at), col(|e| &e.actor), col(|e| &e.kind));
    let (subject, payload) = (col(|e| &e.subject), col(|e| &e.payload));
    let (prev, hash) = (col(|e| &e.prev_hash), col(|e| &e.hash));
    Ok(tx
        .execute(
            "INSERT INTO turnbook.events
                 (site, seq, at, actor, kind, subject, payload, prev_hash, hash)
             SELECT $1, * FROM unnest($2::bigint[], $3::text[], $4::text[], $5::text[],
                                      $6::text[], $7::text[], $8::text[], $9::text[])
             ON CONFLICT (site, seq) DO NOTHING",
            &[
                &site, &seq, &at, &actor, &kind, &subject, &payload, &prev, &hash,
            ],
        )
        .await?)
}

/// Note the time of the site's last shipping round (once a round, not per batch: batches
/// of one round run on several connections at once and would queue on the site's row).
pub async fn mark_shipped(client: &Client, site: &str) -> Result<()> {
    client
        .execute(
            "UPDATE turnbook.sites SET last_shipped = now() WHERE site = $1",
            &[&site],
        )
        .await?;
    Ok(())
}

/// The sites the central store knows, by id.
pub async fn sites(client: &Client) -> Result<Vec<String>> {
    let rows = client
        .query("SELECT site FROM turnbook.sites ORDER BY site", &[])
        .await?;
    Ok(rows.iter().map(|r| r.get(0)).collect())
}

/// One central event with the site its payload names (None when it names none).
#[derive(Debug, Clone)]
pub struct CentralEvent {
    pub event: StoredEvent,
    pub payload_site: Option<String>,
}

/// Call `each` with every event of `site`, in sequence order, as the rows arrive (never
/// all in memory), until it returns false.
pub async fn for_each_event(
    client: &Client,
    site: &str,
    mut each: impl FnMut(CentralEvent) -> bool,
) -> Result<()> {
    use tokio_stream::StreamExt;
    let rows = client
        .query_raw(
            "SELECT seq, at, actor, kind, subject, payload, prev_hash, hash, body ->> 'site'
             FROM turnbook.events WHERE site = $1 ORDER BY seq",
            [site],
        )
        .await?;
    let mut rows = std::pin::pin!(rows);
    while let Some(r) = rows.next().await {
        let r = r?;
        let e = CentralEvent {
            event: StoredEvent {
                seq: r.try_get(0)?,
                at: r.try_get(1)?,
                actor: r.try_get(2)?,
                kind: r.try_get(3)?,
                subject: r.try_get(4)?,
                payload: r.try_get(5)?,
                prev_hash: r.try_get(6)?,
                hash: r.try_get(7)?,
            },
            payload_site: r.try_get(8)?,
        };
        if !each(e) {
            break;
        }
    }
    Ok(())
}

/// A row of `turnbook.lots`.
#[derive(Debug, Clone, serde::Serialize)]
pub struct CentralLot {
    pub site: String,
    pub lot: String,
    pub catalyst: Option<String>,
    pub metal: Option<String>,
    pub family: Option<String>,
    pub loading_wt_pct: Option<f64>,
    pub charged_mass_g: Option<f64>,
    pub registered_at: Option<String>,
    pub cycles: i64,
    pub excluded_cycles: i64,
    pub last_cycle_started: Option<String>,
    pub last_sign_off: Option<String>,
    pub last_sign_off_at: Option<String>,
}

/// The company's lots by site (the `turnbook.lots` view).
pub async fn lots(client: &Client) -> Result<Vec<CentralLot>> {
    let rows = client
        .query(
            "SELECT site, lot, catalyst, metal, family, loading_wt_pct, charged_mass_g,
                    registered_at, cycles, excluded_cycles, last_cycle_started, last_sign_off,
                    last_sign_off_at
             FROM turnbook.lots ORDER BY site, lot",
            &[],
        )
        .await?;
    rows.iter()
        .map(|r| {
            Ok(CentralLot {
                site: r.try_get(0)?,
                lot: r.try_get(1)?,
                catalyst: r.try_get(2)?,
                metal: r.try_get(3)?,
                family: r.try_get(4)?,
                loading_wt_pct: r.try_get(5)?,
                charged_mass_g: r.try_get(6)?,
                registered_at: r.try_get(7)?,
                cycles: r.try_get(8)?,
                excluded_cycles: r.try_get(9)?,
                last_cycle_started: r.try_get(10)?,
                last_sign_off: r.try_get(11)?,
                last_sign_off_at: r.try_get(12)?,
            })
        })
        .collect()
}

// ---- the local side ----

/// Open the site's database read-only, for the shipper: it never takes the write lock,
/// and under WAL it reads beside the service's writer without holding it up.
pub fn open_local_reader(path: &Path) -> Result<Connection> {
    let conn = Connection::open_with_flags(
        path,
        OpenFlags::SQLITE_OPEN_READ_ONLY | OpenFlags::SQLITE_OPEN_NO_MUTEX,
    )?;
    conn.busy_timeout(Duration::from_secs(10))?;
    Ok(conn)
}

/// Up to `limit` events after `after`, in sequence order.
pub fn local_events_after(conn: &Connection, after: i64, limit: usize) -> Result<Vec<StoredEvent>> {
    let mut stmt = conn.prepare_cached(
        "SELECT seq, at, actor, kind, subject, payload, prev_hash, hash FROM events
         WHERE seq > ?1 ORDER BY seq LIMIT ?2",
    )?;
    let limit = i64::try_from(limit).unwrap_or(i64::MAX);
    let rows = stmt.query_map(rusqlite::params![after, limit], |r| {
        Ok(StoredEvent {
            seq: r.get(0)?,
            at: r.get(1)?,
            actor: r.get(2)?,
            kind: r.get(3)?,
            subject: r.get(4)?,
            payload: r.get(5)?,
            prev_hash: r.get(6)?,
            hash: r.get(7)?,
        })
    })?;
    Ok(rows.collect::<std::result::Result<_, _>>()?)
}

/// The hash of the local event `seq`, if there is one.
pub fn local_hash(conn: &Connection, seq: i64) -> Result<Option<String>> {
    use rusqlite::OptionalExtension;
    Ok(conn
        .query_row("SELECT hash FROM events WHERE seq = ?1", [seq], |r| {
            r.get(0)
        })
        .optional()?)
}

// ---- computed figures: derived rows, replaced whole per lot ----

/// A lot's figures version: after which event, and when, the site computed them.
pub type FiguresVersion = (i64, String);

/// The versions of the site's lot figures that the central store holds, by lot.
pub async fn central_figure_versions(
    client: &Client,
    site: &str,
) -> Result<std::collections::HashMap<String, FiguresVersion>> {
    let rows = client
        .query(
            "SELECT lot, after_seq, computed_at FROM turnbook.lot_figures WHERE site = $1",
            &[&site],
        )
        .await?;
    rows.iter()
        .map(|r| Ok((r.try_get(0)?, (r.try_get(1)?, r.try_get(2)?))))
        .collect()
}

/// One round's figures of some lots, each row a JSON object (as the site's tables hold
/// them, flags as arrays).
#[derive(Debug, Default)]
pub struct FiguresBatch {
    pub lots: Vec<String>,
    pub lot_rows: Vec<String>,
    pub cycle_rows: Vec<String>,
}

/// Replace the central figures of `batch.lots` (and drop those of `gone`, lots the site
/// holds no figures for any more) in one transaction.
pub async fn replace_figures(
    client: &mut Client,
    site: &str,
    batch: &FiguresBatch,
    gone: &[String],
) -> Result<()> {
    let tx = client.transaction().await?;
    let mut lots: Vec<&str> = batch.lots.iter().map(String::as_str).collect();
    lots.extend(gone.iter().map(String::as_str));
    tx.execute(
        "DELETE FROM turnbook.cycle_figures WHERE site = $1 AND lot = ANY($2)",
        &[&site, &lots],
    )
    .await?;
    tx.execute(
        "DELETE FROM turnbook.lot_figures WHERE site = $1 AND lot = ANY($2)",
        &[&site, &lots],
    )
    .await?;
    let lot_rows = format!("[{}]", batch.lot_rows.join(","));
    tx.execute(
        "INSERT INTO turnbook.lot_figures (site, lot, state, model, latest_activity,
             cumulative_ton, forecast_status, crossing_cycle, crossing_cycle_lower,
             crossing_cycle_upper, crossing_date, crossing_date_early, crossing_date_late,
             order_by_date, next_batch_verdict, next_batch_activity, next_batch_activity_lower,
             abrupt_loss, flags, attention, after_seq, computed_at)
         SELECT $1, lot, state, model, latest_activity, cumulative_ton, forecast_status,
                crossing_cycle, crossing_cycle_lower, crossing_cycle_upper, crossing_date,
                crossing_date_early, crossing_date_late, order_by_date, next_batch_verdict,
                next_batch_activity, next_batch_activity_lower, abrupt_loss <> 0, flags,
                attention, after_seq, computed_at
         FROM jsonb_to_recordset($2::text::jsonb) AS r(lot text, state text, model text,
             latest_activity float8, cumulative_ton float8, forecast_status text,
             crossing_cycle float8, crossing_cycle_lower float8, crossing_cycle_upper float8,
             crossing_date text, crossing_date_early text, crossing_date_late text,
             order_by_date text, next_batch_verdict text, next_batch_activity float8,
             next_batch_activity_lower float8, abrupt_loss int, flags jsonb, attention jsonb,
             after_seq bigint, computed_at text)",
        &[&site, &lot_rows],
    )
    .await?;
    let cycle_rows = format!("[{}]", batch.cycle_rows.join(","));
    tx.execute(
        "INSERT INTO turnbook.cycle_figures (site, batch_id, lot, cycle_no, ton,
             ton_per_mol_metal_available, cumulative_ton, tof_average_per_h, tof_initial_per_h,
             k_app_per_h, k_app_se_per_h, activity, activity_se, activity_basis,
             metal_charged_mmol, metal_available_mmol, catalyst_to_substrate_mol_per_mol,
             flags, after_seq, computed_at)
         SELECT $1, r.* FROM jsonb_to_recordset($2::text::jsonb) AS r(batch_id text, lot text,
             cycle_no bigint, ton float8, ton_per_mol_metal_available float8,
             cumulative_ton float8, tof_average_per_h float8, tof_initial_per_h float8,
             k_app_per_h float8, k_app_se_per_h float8, activity float8, activity_se float8,
             activity_basis text, metal_charged_mmol float8, metal_available_mmol float8,
             catalyst_to_substrate_mol_per_mol float8, flags jsonb, after_seq bigint,
             computed_at text)",
        &[&site, &cycle_rows],
    )
    .await?;
    tx.commit().await?;
    Ok(())
}

/// The versions of the figures the site holds, by lot.
pub fn local_figure_versions(db: &Path) -> Result<Vec<(String, FiguresVersion)>> {
    let conn = open_local_reader(db)?;
    let mut stmt = conn.prepare_cached("SELECT lot, after_seq, computed_at FROM lot_figures")?;
    let rows = stmt.query_map([], |r| Ok((r.get(0)?, (r.get(1)?, r.get(2)?))))?;
    let versions = rows.collect::<std::result::Result<_, _>>()?;
    Ok(versions)
}

/// The site's figures of these lots as JSON rows, read in one snapshot (so a lot's and
/// its cycles' rows come from the same recompute).
pub fn local_figures(db: &Path, lots: &[String]) -> Result<FiguresBatch> {
    let conn = open_local_reader(db)?;
    let tx = conn.unchecked_transaction()?;
    let mut out = FiguresBatch::default();
    let mut lot_stmt = tx.prepare_cached(
        "SELECT lot, json_object('lot', lot, 'state', state, 'model', model,
             'latest_activity', latest_activity, 'cumulative_ton', cumulative_ton,
             'forecast_status', forecast_status, 'crossing_cycle', crossing_cycle,
             'crossing_cycle_lower', crossing_cycle_lower,
             'crossing_cycle_upper', crossing_cycle_upper, 'crossing_date', crossing_date,
             'crossing_date_early', crossing_date_early,
             'crossing_date_late', crossing_date_late, 'order_by_date', order_by_date,
             'next_batch_verdict', next_batch_verdict,
             'next_batch_activity', next_batch_activity,
             'next_batch_activity_lower', next_batch_activity_lower,
             'abrupt_loss', abrupt_loss, 'flags', json(flags), 'attention', json(attention),
             'after_seq', after_seq, 'computed_at', computed_at)
         FROM lot_figures WHERE lot = ?1",
    )?;
    let mut cycle_stmt = tx.prepare_cached(
        "SELECT json_object('batch_id', batch_id, 'lot', lot, 'cycle_no', cycle_no,
             'ton', ton, 'ton_per_mol_metal_available', ton_per_mol_metal_available,
             'cumulative_ton', cumulative_ton, 'tof_average_per_h', tof_average_per_h,
             'tof_initial_per_h', tof_initial_per_h, 'k_app_per_h', k_app_per_h,
             'k_app_se_per_h', k_app_se_per_h, 'activity', activity,
             'activity_se', activity_se, 'activity_basis', activity_basis,
             'metal_charged_mmol', metal_charged_mmol,
             'metal_available_mmol', metal_available_mmol,
             'catalyst_to_substrate_mol_per_mol', catalyst_to_substrate_mol_per_mol,
             'flags', json(flags), 'after_seq', after_seq, 'computed_at', computed_at)
         FROM cycle_figures WHERE lot = ?1",
    )?;
    for lot in lots {
        let mut rows = lot_stmt.query([lot])?;
        let Some(r) = rows.next()? else { continue };
        out.lots.push(r.get(0)?);
        out.lot_rows.push(r.get(1)?);
        let cycles = cycle_stmt.query_map([lot], |r| r.get::<_, String>(0))?;
        for c in cycles {
            out.cycle_rows.push(c?);
        }
    }
    drop((lot_stmt, cycle_stmt));
    tx.finish()?;
    Ok(out)
}

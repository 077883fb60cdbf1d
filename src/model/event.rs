//! The content of each event, as stored (canonical JSON) and replayed by `verify`.
//!
//! Each payload carries every row its event wrote, so the tables can be rebuilt from the
//! event log alone and compared with what is stored.

use std::borrow::Cow;

use serde::{Deserialize, Serialize};

/// The measurements of a `file-ingested` event, stored compactly: each row as a JSON array
/// in the column order of the `measurements` view, `[id, batch_id, quantity, value, text,
/// kind, source_file_id, line, col, raw]`, rather than an object repeating every name.
/// They are most of a backfill's bytes. Rows as objects (events written before) are read
/// too, so every event ever stored still decodes.
pub mod compact_rows {
    use serde::de::{self, MapAccess, SeqAccess, Visitor};
    use serde::ser::SerializeSeq;
    use serde::{Deserialize, Deserializer, Serializer};

    use super::MeasurementRow;

    pub fn serialize<S: Serializer>(rows: &[MeasurementRow], s: S) -> Result<S::Ok, S::Error> {
        serialize_each(rows.iter(), rows.len(), s)
    }

    /// [`serialize`] for rows held by reference (the writer does not copy a file's rows).
    pub fn serialize_refs<S: Serializer>(
        rows: &[&MeasurementRow],
        s: S,
    ) -> Result<S::Ok, S::Error> {
        serialize_each(rows.iter().copied(), rows.len(), s)
    }

    fn serialize_each<'a, S: Serializer>(
        rows: impl Iterator<Item = &'a MeasurementRow>,
        len: usize,
        s: S,
    ) -> Result<S::Ok, S::Error> {
        let mut seq = s.serialize_seq(Some(len))?;
        for m in rows {
            seq.serialize_element(&(
                m.id,
                &m.batch_id,
                &m.quantity,
                m.value,
                &m.text,
                &m.kind,
                m.source_file_id,
                m.line,
                m.col,
                &m.raw,
            ))?;
        }
        seq.end()
    }

    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<Vec<MeasurementRow>, D::Error> {
        Ok(Vec::<Wire>::deserialize(d)?
            .into_iter()
            .map(|w| w.0)
            .collect())
    }

    /// One row, as an array (compact) or as an object (older events).
    struct Wire(MeasurementRow);

    impl<'de> Deserialize<'de> for Wire {
        fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
            d.deserialize_any(WireVisitor)
        }
    }

    struct WireVisitor;

    impl<'de> Visitor<'de> for WireVisitor {
        type Value = Wire;

        fn expecting(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
            f.write_str("a measurement row, as an array of 10 values or as an object")
        }

        fn visit_seq<A: SeqAccess<'de>>(self, mut a: A) -> Result<Wire, A::Error> {
            fn next<'de, A: SeqAccess<'de>, T: Deserialize<'de>>(
                a: &mut A,
                i: usize,
            ) -> Result<T, A::Error> {
                a.next_element()?
                    .ok_or_else(|| de::Error::invalid_length(i, &"10 values"))
            }
            let row = MeasurementRow {
                id: next(&mut a, 0)?,
                batch_id: next(&mut a, 1)?,
                quantity: next(&mut a, 2)?,
                value: next(&mut a, 3)?,
                text: next(&mut a, 4)?,
                kind: next(&mut a, 5)?,
                source_file_id: next(&mut a, 6)?,
                line: next(&mut a, 7)?,
                col: next(&mut a, 8)?,
                raw: next(&mut a, 9)?,
            };
            if a.next_element::<de::IgnoredAny>()?.is_some() {
                return Err(de::Error::invalid_length(11, &"10 values"));
            }
            Ok(Wire(row))
        }

        fn visit_map<A: MapAccess<'de>>(self, a: A) -> Result<Wire, A::Error> {
            MeasurementRow::deserialize(de::value::MapAccessDeserializer::new(a)).map(Wire)
        }
    }
}

/// A row of `source_files`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FileRow {
    pub id: i64,
    pub sha256: String,
    pub path: String,
    pub size: i64,
    pub mtime: Option<String>,
    pub profile: Option<String>,
    pub site: Option<String>,
    pub seen_at: String,
    pub outcome: String,
    pub error: Option<String>,
    pub rows_new: i64,
    pub rows_known: i64,
    pub rows_conflict: i64,
    pub quarantined: Option<String>,
}

/// A row of `source_files` by reference: serialises exactly as [`FileRow`] (a test checks
/// it), so that the writer of a backfill need not copy a file's names to record it.
#[derive(Debug, Clone, Copy, Serialize)]
pub struct FileRowRef<'a> {
    pub id: i64,
    pub sha256: &'a str,
    pub path: &'a str,
    pub size: i64,
    pub mtime: Option<&'a str>,
    pub profile: Option<&'a str>,
    pub site: Option<&'a str>,
    pub seen_at: &'a str,
    pub outcome: &'a str,
    pub error: Option<&'a str>,
    pub rows_new: i64,
    pub rows_known: i64,
    pub rows_conflict: i64,
    pub quarantined: Option<&'a str>,
}

impl FileRow {
    pub fn as_ref(&self) -> FileRowRef<'_> {
        FileRowRef {
            id: self.id,
            sha256: &self.sha256,
            path: &self.path,
            size: self.size,
            mtime: self.mtime.as_deref(),
            profile: self.profile.as_deref(),
            site: self.site.as_deref(),
            seen_at: &self.seen_at,
            outcome: &self.outcome,
            error: self.error.as_deref(),
            rows_new: self.rows_new,
            rows_known: self.rows_known,
            rows_conflict: self.rows_conflict,
            quarantined: self.quarantined.as_deref(),
        }
    }
}

/// A row of `measurements`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct MeasurementRow {
    pub id: i64,
    pub batch_id: String,
    /// A quantity key, or lot / cycle_no / started_at: nearly always one of the fixed
    /// names, so borrowed rather than copied for each value a file holds.
    pub quantity: Cow<'static, str>,
    pub value: Option<f64>,
    pub text: Option<String>,
    /// observed, conflict or correction (borrowed, as `quantity`).
    pub kind: Cow<'static, str>,
    pub source_file_id: Option<i64>,
    pub line: Option<i64>,
    pub col: Option<i64>,
    pub raw: Option<String>,
}

/// A row of `lots` (the registration of a catalyst lot).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LotRecord {
    pub lot: String,
    pub catalyst: String,
    pub metal: String,
    pub loading_wt_pct: f64,
    pub charged_mass_g: f64,
    pub received: Option<String>,
    pub supplier_lot: Option<String>,
    pub cost: Option<f64>,
    pub site: Option<String>,
    /// Water content of the catalyst as charged, wt % (for catalysts charged water-wet;
    /// the loading is on the dry mass). Absent from events written before it existed.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub water_content_wt_pct: Option<f64>,
    /// The family the lot belongs to: lots of one family (or, without one, of one catalyst
    /// description) are a population whose earlier lots give a young lot its prior.
    /// Absent from the hashed payload when not given, so older events keep verifying.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub family: Option<String>,
}

/// What an event did. The tag is the event's kind.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "kebab-case")]
pub enum Payload {
    /// A file's records were stored. `lots` are registrations or changes from a lot sheet.
    FileIngested {
        file: FileRow,
        #[serde(with = "compact_rows")]
        measurements: Vec<MeasurementRow>,
        lots: Vec<LotRecord>,
    },
    /// A file whose content was ingested before.
    FileDuplicate { file: FileRow, of_file_id: i64 },
    /// A file that could not be read; it is kept (quarantine) and its error stored.
    FileRejected { file: FileRow },
    /// A lot registered or changed by a person (not from a lot sheet file).
    LotRegistered {
        lot: LotRecord,
        reason: Option<String>,
    },
    /// A value corrected by a person, with the reason.
    Correction {
        measurement: MeasurementRow,
        previous: Option<f64>,
        reason: String,
    },
    /// A cycle excluded from (or taken back into) fits.
    Exclusion {
        batch_id: String,
        excluded: bool,
        reason: String,
    },
    /// A free-text annotation on a lot or a batch.
    Note {
        lot: Option<String>,
        batch_id: Option<String>,
        text: String,
    },
    /// A reviewer's sign-off of exactly the content whose SHA-256 is given.
    SignOff {
        lot: String,
        meaning: String,
        signed_sha256: String,
        what: String,
        comment: Option<String>,
        /// The roster name signed as (`--as`); absent in sign-offs made before signers
        /// were named.
        #[serde(default, skip_serializing_if = "Option::is_none")]
        signer: Option<String>,
        /// The operating-system account the sign-off was made from: evidence, not proof
        /// of identity.
        #[serde(default, skip_serializing_if = "Option::is_none")]
        os_user: Option<String>,
    },
    /// From the next event on, links are keyed (HMAC-SHA-256 under the chain key), not
    /// plain SHA-256; `key_proof` (HMAC under the key of the hash before this event, see
    /// the chain module) shows the switch was made by a holder of the key.
    ChainKeyed { rule: String, key_proof: String },
    /// A person acknowledged or closed an alert's current episode, with a reason.
    AlertAction {
        alert_key: String,
        episode: i64,
        /// `acknowledged` or `closed`.
        action: String,
        reason: String,
    },
    /// An alert condition changed (opened, worse, eased, cleared) and its message was
    /// queued, or a digest was queued: the outbox row and the condition as written.
    AlertQueued(QueuedMessage),
    /// A delivery attempt changed an outbox row: its delivery columns as written.
    MailOutcome(DeliveryState),
    /// From here on every outbox row and alert condition change is an event; rows below
    /// `first_outbox_id` (`legacy_rows` of them) were queued before.
    OutboxChained {
        first_outbox_id: i64,
        legacy_rows: i64,
    },
    /// Part of a large file's values: a large export is stored as a run of these, each
    /// holding the measurements of a few thousand of its rows (so that no payload grows
    /// with the file), followed in the same transaction by the file's `file-ingested`
    /// event (its `source_files` row, with no measurements of its own).
    FileRows {
        file_id: i64,
        /// 1, 2, ... within the file.
        part: i64,
        #[serde(with = "compact_rows")]
        measurements: Vec<MeasurementRow>,
    },
}

impl Payload {
    /// Reads a payload from its JSON text, as `serde_json::from_str` does.
    ///
    /// Why not that alone: the derived reader of an internally tagged enum first buffers the
    /// whole payload as a generic tree to find the tag. For a large file's part (2,048 rows,
    /// about 22,000 values) that tree is about 15 MB of small allocations, the peak of a
    /// replay. A part as written starts with its tag, so it is read straight into its
    /// fields; any other text, or one this reading refuses, takes the derived path, so
    /// what is accepted and what it reads as are the same either way.
    pub fn from_json(text: &str) -> serde_json::Result<Payload> {
        const FILE_ROWS: &str = r#"{"kind":"file-rows","#;
        if text.starts_with(FILE_ROWS)
            && let Ok(p) = serde_json::from_str::<FileRowsFields>(text)
        {
            return Ok(Payload::FileRows {
                file_id: p.file_id,
                part: p.part,
                measurements: p.measurements,
            });
        }
        serde_json::from_str(text)
    }
}

/// The fields of a `file-rows` payload, read without the enum's buffering
/// ([`Payload::from_json`]). `kind` is read so that a second `kind` key is refused here as
/// a duplicate and left to the derived reader.
#[derive(Deserialize)]
struct FileRowsFields {
    #[allow(dead_code)]
    kind: serde::de::IgnoredAny,
    file_id: i64,
    part: i64,
    #[serde(deserialize_with = "compact_rows::deserialize")]
    measurements: Vec<MeasurementRow>,
}

/// An outbox row as queued, with the condition it left (`alert-queued`). The message's
/// texts are held as SHA-256 digests: the event proves them without a second copy.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct QueuedMessage {
    /// The outbox row, or None when an identical message was already queued.
    pub outbox_id: Option<i64>,
    pub alert_key: String,
    pub rule: String,
    pub lot: String,
    pub episode: i64,
    pub state: String,
    pub severity: i64,
    pub message_id: String,
    pub in_reply_to: Option<String>,
    pub subject_sha256: String,
    pub body_text_sha256: String,
    pub body_html_sha256: String,
    pub recipients: Vec<String>,
    pub queued_at: String,
    pub next_attempt_at: Option<String>,
    pub last_error: Option<String>,
    /// The condition's thread after the change; None for a digest, which has no condition.
    pub thread_message_id: Option<String>,
}

/// The delivery columns of an outbox row after an attempt (`mail-outcome`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DeliveryState {
    pub outbox_id: i64,
    pub message_id: String,
    /// `sent` or `failed`.
    pub outcome: String,
    pub attempts: i64,
    pub next_attempt_at: Option<String>,
    pub last_error: Option<String>,
    pub delivered_at: Option<String>,
    pub server_reply: Option<String>,
}

/// The `file-ingested` payload by reference: serialises exactly as
/// [`Payload::FileIngested`] (a test checks it), without copying every row of the file
/// first; the writer of a backfill builds one per file.
#[derive(Debug, Serialize)]
#[serde(tag = "kind", rename = "file-ingested")]
pub struct FileIngestedRef<'a> {
    pub file: FileRowRef<'a>,
    #[serde(serialize_with = "compact_rows::serialize_refs")]
    pub measurements: &'a [&'a MeasurementRow],
    pub lots: &'a [LotRecord],
}

/// The `file-rows` payload by reference: serialises exactly as [`Payload::FileRows`].
#[derive(Debug, Serialize)]
#[serde(tag = "kind", rename = "file-rows")]
pub struct FileRowsRef<'a> {
    pub file_id: i64,
    pub part: i64,
    #[serde(serialize_with = "compact_rows::serialize_refs")]
    pub measurements: &'a [&'a MeasurementRow],
}

impl Payload {
    /// The event kind, as stored in `events.kind`.
    pub fn kind(&self) -> &'static str {
        match self {
            Payload::FileIngested { .. } => "file-ingested",
            Payload::FileDuplicate { .. } => "file-duplicate",
            Payload::FileRejected { .. } => "file-rejected",
            Payload::LotRegistered { .. } => "lot-registered",
            Payload::Correction { .. } => "correction",
            Payload::Exclusion { .. } => "exclusion",
            Payload::Note { .. } => "note",
            Payload::SignOff { .. } => "sign-off",
            Payload::ChainKeyed { .. } => "chain-keyed",
            Payload::AlertAction { .. } => "alert-action",
            Payload::AlertQueued(_) => "alert-queued",
            Payload::MailOutcome(_) => "mail-outcome",
            Payload::OutboxChained { .. } => "outbox-chained",
            Payload::FileRows { .. } => "file-rows",
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A conversion value with every provenance field set, as an export gives it.
    fn conversion_row() -> MeasurementRow {
        MeasurementRow {
            id: 9,
            batch_id: "B1".into(),
            quantity: "conversion".into(),
            value: Some(0.1 + 0.2),
            text: None,
            kind: "observed".into(),
            source_file_id: Some(3),
            line: Some(2),
            col: Some(7),
            raw: Some("30,0".into()),
        }
    }

    #[test]
    fn file_ingested_by_reference_encodes_as_the_payload() {
        let file = FileRow {
            id: 3,
            sha256: "ab".repeat(32),
            path: "/x/\"q\".csv".into(),
            size: 10,
            mtime: None,
            profile: Some("p".into()),
            site: None,
            seen_at: "2026-01-01T00:00:00.000Z".into(),
            outcome: "ingested".into(),
            error: None,
            rows_new: 1,
            rows_known: 0,
            rows_conflict: 0,
            quarantined: None,
        };
        let m = conversion_row();
        let lot = LotRecord {
            lot: "L".into(),
            catalyst: "Pd/C".into(),
            metal: "Pd".into(),
            loading_wt_pct: 5.0,
            charged_mass_g: 1.25,
            received: None,
            supplier_lot: None,
            cost: Some(100.0),
            site: None,
            water_content_wt_pct: None,
            family: None,
        };
        let owned = Payload::FileIngested {
            file: file.clone(),
            measurements: vec![m.clone(), m.clone()],
            lots: vec![lot.clone()],
        };
        let by_ref = FileIngestedRef {
            file: file.as_ref(),
            measurements: &[&m, &m],
            lots: &[lot],
        };
        let text = serde_json::to_string(&owned).unwrap();
        assert_eq!(text, serde_json::to_string(&by_ref).unwrap());
        // Rows are arrays in the view's column order, and decode back exactly.
        assert!(
            text.contains(r#""measurements":[[9,"B1","conversion",0.30000000000000004,null,"observed",3,2,7,"30,0"],"#),
            "{text}"
        );
        assert_eq!(serde_json::from_str::<Payload>(&text).unwrap(), owned);
    }

    #[test]
    fn a_lot_without_water_content_encodes_as_before_it_existed() {
        // A registration stored before the field existed: re-encoding it must give the
        // same bytes, or its event's hash would no longer verify.
        let old = r#"{"lot":"L","catalyst":"Pd/C","metal":"Pd","loading_wt_pct":5.0,"charged_mass_g":1.25,"received":null,"supplier_lot":null,"cost":null,"site":null}"#;
        let rec: LotRecord = serde_json::from_str(old).unwrap();
        assert_eq!(rec.water_content_wt_pct, None);
        assert_eq!(serde_json::to_string(&rec).unwrap(), old);
        let wet = LotRecord {
            water_content_wt_pct: Some(50.0),
            ..rec
        };
        let text = serde_json::to_string(&wet).unwrap();
        assert!(
            text.ends_with(r#""site":null,"water_content_wt_pct":50.0}"#),
            "{text}"
        );
        assert_eq!(serde_json::from_str::<LotRecord>(&text).unwrap(), wet);
    }

    #[test]
    fn rows_written_as_objects_by_earlier_versions_still_decode() {
        let old = r#"{"kind":"file-ingested","file":{"id":6,"sha256":"bf","path":"/e/b.txt","size":298,"mtime":null,"profile":"balance","site":"KV4","seen_at":"2026-12-02T01:05:20.492Z","outcome":"ingested","error":null,"rows_new":1,"rows_known":0,"rows_conflict":0,"quarantined":null},"measurements":[{"id":21,"batch_id":"KV4-H-006","quantity":"substrate","value":1.2,"text":null,"kind":"observed","source_file_id":6,"line":2,"col":4,"raw":"1200,0"}],"lots":[]}"#;
        let Payload::FileIngested { measurements, .. } = serde_json::from_str(old).unwrap() else {
            panic!("a file-ingested payload");
        };
        assert_eq!(measurements.len(), 1);
        assert_eq!(measurements[0].id, 21);
        assert_eq!(measurements[0].value, Some(1.2));
        assert_eq!(measurements[0].raw.as_deref(), Some("1200,0"));
    }

    #[test]
    fn a_row_of_the_wrong_length_is_an_error_not_a_panic() {
        for rows in [
            r#"[[1,"B","q",0.5,null,"observed",1,2,3]]"#,
            r#"[[1,"B","q",0.5,null,"observed",1,2,3,"x","extra"]]"#,
            r#"[1]"#,
        ] {
            let body = format!(
                r#"{{"kind":"file-ingested","file":{{"id":1,"sha256":"a","path":"p","size":1,"mtime":null,"profile":null,"site":null,"seen_at":"t","outcome":"ingested","error":null,"rows_new":0,"rows_known":0,"rows_conflict":0,"quarantined":null}},"measurements":{rows},"lots":[]}}"#
            );
            assert!(serde_json::from_str::<Payload>(&body).is_err(), "{rows}");
        }
    }

    #[test]
    fn a_part_reads_the_same_straight_or_through_the_enum() {
        let m = conversion_row();
        let written = serde_json::to_string(&FileRowsRef {
            file_id: 3,
            part: 2,
            measurements: &[&m, &m],
        })
        .unwrap();
        assert!(written.starts_with(r#"{"kind":"file-rows","#), "{written}");
        let derived = serde_json::from_str::<Payload>(&written).unwrap();
        assert_eq!(Payload::from_json(&written).unwrap(), derived);
        assert_eq!(
            derived,
            Payload::FileRows {
                file_id: 3,
                part: 2,
                measurements: vec![m.clone(), m],
            }
        );
        // Texts the straight reading refuses or does not take get the derived reader's
        // answer: another key order, a second tag, a row of the wrong length, another kind.
        for text in [
            r#"{"part":1,"kind":"file-rows","file_id":4,"measurements":[]}"#.to_string(),
            r#"{"kind":"file-rows","file_id":4,"part":1,"measurements":[],"kind":"x"}"#.to_string(),
            r#"{"kind":"file-rows","file_id":4,"part":1,"measurements":[[1,"B"]]}"#.to_string(),
            r#"{"kind":"file-rows","file_id":4,"part":1}"#.to_string(),
            written.replacen("file-rows", "file-ingested", 1),
        ] {
            let straight = Payload::from_json(&text).map_err(|e| e.to_string());
            let derived = serde_json::from_str::<Payload>(&text).map_err(|e| e.to_string());
            assert_eq!(straight, derived, "{text}");
        }
    }
}

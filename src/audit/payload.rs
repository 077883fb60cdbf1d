//! The content of each event, as stored (canonical JSON) and replayed by `verify`.
//!
//! Each payload carries every row its event wrote, so the tables can be rebuilt from the
//! event log alone and compared with what is stored.

use serde::{Deserialize, Serialize};

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

/// A row of `measurements`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct MeasurementRow {
    pub id: i64,
    pub batch_id: String,
    pub quantity: String,
    pub value: Option<f64>,
    pub text: Option<String>,
    pub kind: String,
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
}

/// What an event did. The tag is the event's kind.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "kebab-case")]
pub enum Payload {
    /// A file's records were stored. `lots` are registrations or changes from a lot sheet.
    FileIngested {
        file: FileRow,
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
    },
}

/// The `file-ingested` payload by reference: serialises exactly as
/// [`Payload::FileIngested`] (a test checks it), without copying every row of the file
/// first; the writer of a backfill builds one per file.
#[derive(Debug, Serialize)]
#[serde(tag = "kind", rename = "file-ingested")]
pub struct FileIngestedRef<'a> {
    pub file: &'a FileRow,
    pub measurements: &'a [MeasurementRow],
    pub lots: &'a [LotRecord],
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
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

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
        let m = MeasurementRow {
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
        };
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
        };
        let owned = Payload::FileIngested {
            file: file.clone(),
            measurements: vec![m.clone(), m.clone()],
            lots: vec![lot.clone()],
        };
        let by_ref = FileIngestedRef {
            file: &file,
            measurements: &[m.clone(), m],
            lots: &[lot],
        };
        assert_eq!(
            serde_json::to_string(&owned).unwrap(),
            serde_json::to_string(&by_ref).unwrap()
        );
    }
}

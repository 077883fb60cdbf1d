//! The site a process writes for: every event it appends to a site's database carries the
//! site id inside its hashed payload, so the central store can tell the sites' chains apart
//! and a copy cannot be passed off as another site's.

use std::borrow::Cow;
use std::collections::HashMap;
use std::sync::{Arc, Mutex, PoisonError};

use rusqlite::Connection;

/// The site ids given by this process, by database file.
static SITES: Mutex<Option<HashMap<String, Arc<str>>>> = Mutex::new(None);

/// Stamp every later event written to `conn`'s database file by this process with the
/// site `id` (see [`stamp`]).
pub fn use_site(conn: &Connection, id: &str) {
    let mut sites = SITES.lock().unwrap_or_else(PoisonError::into_inner);
    sites
        .get_or_insert_with(HashMap::new)
        .insert(conn.path().unwrap_or_default().to_string(), Arc::from(id));
}

/// The payload `body` (a JSON object) with `"site":"ID"` added last when this process
/// gave a site for `conn`'s database, so the site is inside what the event's hash covers.
/// No payload kind has a member of that name at its top level; readers of payloads ignore
/// it, and events without it verify as before.
pub fn stamp<'a>(conn: &Connection, body: &'a str) -> Cow<'a, str> {
    let site = {
        let sites = SITES.lock().unwrap_or_else(PoisonError::into_inner);
        match sites.as_ref() {
            Some(s) if !s.is_empty() => s.get(conn.path().unwrap_or_default()).cloned(),
            _ => None,
        }
    };
    match site {
        Some(site) => stamped(body, &site),
        None => Cow::Borrowed(body),
    }
}

/// [`stamp`] with the site given; a body that is not an object is left as it is.
pub fn stamped<'a>(body: &'a str, site: &str) -> Cow<'a, str> {
    let Some(open) = body.strip_suffix('}').filter(|o| o.starts_with('{')) else {
        return Cow::Borrowed(body);
    };
    let quoted = serde_json::Value::String(site.to_string()).to_string();
    let sep = if open.len() > 1 { "," } else { "" };
    Cow::Owned(format!("{open}{sep}\"site\":{quoted}}}"))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::Payload;

    #[test]
    fn a_stamped_payload_decodes_as_before_and_names_its_site() {
        let p = Payload::Note {
            lot: Some("L1".into()),
            batch_id: None,
            text: "site: north".into(),
        };
        let body = crate::model::chain::canonical(&p).unwrap();
        let s = stamped(&body, "north-3");
        assert!(s.ends_with(r#","site":"north-3"}"#), "{s}");
        assert_eq!(serde_json::from_str::<Payload>(&s).unwrap(), p);
        let v: serde_json::Value = serde_json::from_str(&s).unwrap();
        assert_eq!(v["site"], "north-3");
        assert_eq!(stamped("{}", "a"), r#"{"site":"a"}"#);
        assert_eq!(stamped("[1]", "a"), "[1]");
    }
}

//! Parser state kept from file to file. A reader meets many files from the same instrument,
//! which share a header row: resolving that row against the profile (folding case,
//! splitting units out of the cells, reading them) cost about half of parsing a one-row
//! file, and re-reading the profile's date layout for every value much of the rest.

use std::fmt;

use super::dates::DateLayouts;
use super::decode::decode;
use super::parse::{Body, Chunked, Layout};
use super::profile::Profile;
use super::record::{ParseError, ParsedFile};

/// Profiles remembered; one more clears the cache.
const MAX_PROFILES: usize = 16;
/// Header layouts remembered over all profiles; one more forgets them all, so a folder of
/// ever-changing headers costs no more memory than this.
const MAX_LAYOUTS: usize = 32;
/// Longer header rows are resolved for every file and never kept (real ones are far shorter).
const MAX_HEADER_BYTES: usize = 4096;

/// [`parse_valid`](super::parse_valid) for a run of files, remembering for each profile the
/// layouts of the header rows it has met and the profile's date layouts. Results, errors
/// included, are exactly `parse_valid`'s. One per reading thread, kept for its lifetime.
///
/// A profile is known by its whole content, not by name or address, so a changed profile
/// (a reloaded configuration) is never read through an old layout. A header row is known by
/// its exact cells. Failed resolutions are not kept: their messages name the file's line.
#[derive(Default)]
pub struct ParseCache {
    profiles: Vec<Known>,
    /// Header layouts kept over all profiles.
    layouts: usize,
    /// Index of the profile used last (a reader's files come folder by folder).
    last: usize,
    /// The present time, passed in by the caller for the date window's later bound.
    now: Option<chrono::NaiveDateTime>,
}

struct Known {
    profile: Profile,
    dates: DateLayouts,
    headers: Vec<KnownHeader>,
}

struct KnownHeader {
    /// The header row's fields as [`Record::raw`](super::delimited::Record::raw) gives them.
    fields: Vec<u8>,
    ends: Vec<usize>,
    layout: Layout,
}

impl fmt::Debug for ParseCache {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.debug_struct("ParseCache")
            .field("profiles", &self.profiles.len())
            .field("layouts", &self.layouts)
            .finish()
    }
}

impl ParseCache {
    pub fn new() -> ParseCache {
        ParseCache::default()
    }

    /// The present time the files that follow are judged at: a date more than the
    /// profile's `latest_days_ahead` after it is refused. Without it (a new cache), dates
    /// are bounded by the profile's earliest date only, as [`parse_valid`](super::parse_valid)
    /// bounds them.
    pub fn set_now(&mut self, now: chrono::NaiveDateTime) {
        self.now = Some(now);
    }

    /// Decode and parse one export file through a profile the caller has validated, as
    /// [`parse_valid`](super::parse_valid) does.
    pub fn parse_valid(
        &mut self,
        bytes: &[u8],
        profile: &Profile,
    ) -> Result<ParsedFile, ParseError> {
        if super::spreadsheet::is_spreadsheet(bytes) {
            return super::spreadsheet::parse_sheet(bytes, profile, self.now);
        }
        let text = decode(bytes, profile.encoding)?;
        let body = Body::open(&text, profile)?;
        match self.layout_for(profile, &body)? {
            Some((layout, dates)) => body.rows(profile, layout, dates),
            None => {
                let layout = Layout::resolve(profile, body.header(), body.header_line())?;
                body.rows(profile, &layout, &DateLayouts::unprepared(self.now))
            }
        }
    }

    /// [`ParseCache::parse_valid`] for a large file: the rows are handed to `sink` in
    /// chunks of at most `chunk` rows, in file order, and never held all at once; returns
    /// the number of rows. Errors are `parse_valid`'s, met when reading reaches them.
    pub fn parse_in_chunks<E>(
        &mut self,
        bytes: &[u8],
        profile: &Profile,
        chunk: usize,
        mut sink: impl FnMut(ParsedFile) -> Result<(), E>,
    ) -> Result<u64, Chunked<E>> {
        let text = decode(bytes, profile.encoding)?;
        let body = Body::open(&text, profile)?;
        match self.layout_for(profile, &body)? {
            Some((layout, dates)) => body.rows_in_chunks(profile, layout, dates, chunk, &mut sink),
            None => {
                let layout = Layout::resolve(profile, body.header(), body.header_line())?;
                let dates = DateLayouts::unprepared(self.now);
                body.rows_in_chunks(profile, &layout, &dates, chunk, &mut sink)
            }
        }
    }

    /// The kept layout of the body's header and the profile's date layouts, resolving and
    /// keeping the layout if it is new; `None` when the header is not to be kept.
    fn layout_for(
        &mut self,
        profile: &Profile,
        body: &Body<'_>,
    ) -> Result<Option<(&Layout, &DateLayouts)>, ParseError> {
        let (fields, ends) = body.header().raw();
        if fields.len() > MAX_HEADER_BYTES {
            return Ok(None);
        }
        let at = self.profile_at(profile);
        let now = self.now;
        let Some(known) = self.profiles.get_mut(at) else {
            return Ok(None);
        };
        known.dates.now = now;
        let known = &*known;
        let i = match known
            .headers
            .iter()
            .position(|h| h.fields == fields && h.ends == ends)
        {
            Some(i) => i,
            None => {
                let layout = Layout::resolve(profile, body.header(), body.header_line())?;
                if self.layouts >= MAX_LAYOUTS {
                    for p in &mut self.profiles {
                        p.headers.clear();
                    }
                    self.layouts = 0;
                }
                let Some(known) = self.profiles.get_mut(at) else {
                    return Ok(None);
                };
                known.headers.push(KnownHeader {
                    fields: fields.to_vec(),
                    ends: ends.to_vec(),
                    layout,
                });
                self.layouts += 1;
                known.headers.len() - 1
            }
        };
        Ok(self
            .profiles
            .get(at)
            .and_then(|k| Some((&k.headers.get(i)?.layout, &k.dates))))
    }

    /// The index of the profile's entry, made if new.
    fn profile_at(&mut self, profile: &Profile) -> usize {
        if self
            .profiles
            .get(self.last)
            .is_some_and(|k| k.profile == *profile)
        {
            return self.last;
        }
        if let Some(i) = self.profiles.iter().position(|k| k.profile == *profile) {
            self.last = i;
            return i;
        }
        if self.profiles.len() >= MAX_PROFILES {
            self.profiles.clear();
            self.layouts = 0;
        }
        self.profiles.push(Known {
            profile: profile.clone(),
            dates: DateLayouts::prepared(),
            headers: Vec::new(),
        });
        self.last = self.profiles.len() - 1;
        self.last
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn profile(extra: &str) -> Profile {
        let toml = format!(
            "kind = \"cycles\"\ncolumns.batch_id = {{ header = \"Batch\" }}\n\
             columns.conversion = {{ header = \"Conv\", unit = \"%\" }}\n{extra}"
        );
        match Profile::from_toml(&toml) {
            Ok(p) => p,
            Err(e) => panic!("test profile invalid: {e}"),
        }
    }

    #[test]
    fn ever_changing_headers_stay_bounded() {
        let p = profile("");
        let mut cache = ParseCache::new();
        for i in 0..200 {
            let text = format!("Batch,Conv,extra {i}\nB1,50,\n");
            assert!(cache.parse_valid(text.as_bytes(), &p).is_ok());
            assert!(cache.layouts <= MAX_LAYOUTS);
            let kept: usize = cache.profiles.iter().map(|k| k.headers.len()).sum();
            assert_eq!(kept, cache.layouts);
        }
        assert_eq!(cache.profiles.len(), 1);
    }

    #[test]
    fn ever_changing_profiles_stay_bounded() {
        let mut cache = ParseCache::new();
        for i in 0..100 {
            let p = profile(&format!("skip_lines = {i}\n"));
            let text = format!("{}Batch,Conv\nB1,50\n", "banner\n".repeat(i));
            assert!(cache.parse_valid(text.as_bytes(), &p).is_ok());
            assert!(cache.profiles.len() <= MAX_PROFILES);
            assert!(cache.layouts <= MAX_LAYOUTS);
        }
    }

    #[test]
    fn a_repeated_header_is_resolved_once() {
        let p = profile("");
        let mut cache = ParseCache::new();
        for i in 0..5 {
            let text = format!("Batch,Conv\nB{i},50\n");
            assert!(cache.parse_valid(text.as_bytes(), &p).is_ok());
        }
        assert_eq!(cache.layouts, 1);
        // Failures are not kept.
        assert!(cache.parse_valid(b"Batch,Cnv\nB1,50\n", &p).is_err());
        assert_eq!(cache.layouts, 1);
    }

    #[test]
    fn long_headers_are_not_kept() {
        let p = profile("");
        let mut cache = ParseCache::new();
        let text = format!("Batch,Conv,{}\nB1,50,\n", "x".repeat(MAX_HEADER_BYTES));
        assert!(cache.parse_valid(text.as_bytes(), &p).is_ok());
        assert_eq!(cache.layouts, 0);
    }
}

//! One watched export folder as configured under `[[folders]]`, and its validation.

use std::path::PathBuf;

use globset::{GlobBuilder, GlobSet, GlobSetBuilder};
use serde::Deserialize;

use super::error::WatchError;

/// How the watcher learns about new files in a folder.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum WatchMode {
    /// Operating-system file events (inotify on Linux); a timer runs only while files settle.
    #[default]
    Events,
    /// Periodic directory scans, for network shares where file events do not arrive.
    Poll,
}

/// One `[[folders]]` entry: where an instrument drops its exports and how to read them.
#[derive(Debug, Clone, PartialEq, Eq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct WatchFolder {
    /// The export folder.
    pub path: PathBuf,
    /// Name of the export profile used to parse files from here (interpreted by the pipeline).
    pub profile: String,
    /// Optional plant or site label carried along with the files.
    #[serde(default)]
    pub site: Option<String>,
    /// Also watch sub-folders.
    #[serde(default)]
    pub recursive: bool,
    /// `"events"` (default) or `"poll"`.
    #[serde(default)]
    pub mode: WatchMode,
    /// Seconds between scans in poll mode.
    #[serde(default = "default_poll_interval")]
    pub poll_interval: u64,
    /// Milliseconds a file's size and modification time must stay unchanged before it is read.
    #[serde(default = "default_settle")]
    pub settle: u64,
    /// Glob patterns of names never offered (temporary, partial, hidden and backup files).
    #[serde(default = "default_ignore")]
    pub ignore: Vec<String>,
}

/// Shortest settle time accepted: below it timer jitter dominates and a slow writer's
/// pause between two writes would already count as "finished".
pub const MIN_SETTLE_MS: u64 = 50;
/// Longest settle time accepted (one hour); a longer wait is almost surely a unit mistake.
pub const MAX_SETTLE_MS: u64 = 3_600_000;
/// Longest poll interval accepted (one day).
pub const MAX_POLL_INTERVAL_S: u64 = 86_400;

fn default_poll_interval() -> u64 {
    5
}

fn default_settle() -> u64 {
    2000
}

/// Names that instruments and editors use while a file is incomplete or private
/// (common practice).
pub fn default_ignore() -> Vec<String> {
    ["*.tmp", "*.part", "~*", ".*", "*.swp", "*~"]
        .iter()
        .map(|s| (*s).to_string())
        .collect()
}

impl WatchFolder {
    /// A folder entry with every optional key at its default.
    pub fn new(path: impl Into<PathBuf>, profile: impl Into<String>) -> Self {
        Self {
            path: path.into(),
            profile: profile.into(),
            site: None,
            recursive: false,
            mode: WatchMode::default(),
            poll_interval: default_poll_interval(),
            settle: default_settle(),
            ignore: default_ignore(),
        }
    }

    /// Checks the entry at position `index`; the error names the key at fault so the user
    /// can find it in the configuration file.
    pub fn validate(&self, index: usize) -> Result<(), WatchError> {
        let bad =
            |key: &'static str, reason: String| WatchError::InvalidFolder { index, key, reason };
        if self.path.as_os_str().is_empty() {
            return Err(bad("path", "must not be empty".into()));
        }
        if self.profile.trim().is_empty() {
            return Err(bad("profile", "must name an export profile".into()));
        }
        if let Some(site) = &self.site
            && site.trim().is_empty()
        {
            return Err(bad("site", "must not be empty when given".into()));
        }
        if self.poll_interval == 0 || self.poll_interval > MAX_POLL_INTERVAL_S {
            return Err(bad(
                "poll_interval",
                format!(
                    "{} s is out of range: expected 1 to {MAX_POLL_INTERVAL_S} seconds",
                    self.poll_interval
                ),
            ));
        }
        if !(MIN_SETTLE_MS..=MAX_SETTLE_MS).contains(&self.settle) {
            return Err(bad(
                "settle",
                format!(
                    "{} ms is out of range: expected {MIN_SETTLE_MS} to {MAX_SETTLE_MS} milliseconds",
                    self.settle
                ),
            ));
        }
        self.ignore_set().map_err(|reason| bad("ignore", reason))?;
        Ok(())
    }

    /// Compiles the ignore patterns. Matching is case-insensitive because exports often come
    /// from Windows machines where `X.TMP` and `x.tmp` are the same file (common practice).
    pub(crate) fn ignore_set(&self) -> Result<GlobSet, String> {
        let mut builder = GlobSetBuilder::new();
        for pattern in &self.ignore {
            if pattern.contains('/') || pattern.contains('\\') {
                return Err(format!(
                    "pattern {pattern:?} contains a path separator, but patterns are matched on single names"
                ));
            }
            let glob = GlobBuilder::new(pattern)
                .case_insensitive(true)
                .build()
                .map_err(|e| format!("pattern {pattern:?} is not a valid glob: {e}"))?;
            builder.add(glob);
        }
        builder
            .build()
            .map_err(|e| format!("patterns cannot be combined: {e}"))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn parse(text: &str) -> Result<WatchFolder, toml::de::Error> {
        toml::from_str(text)
    }

    #[test]
    fn defaults_apply_when_keys_are_missing() {
        let f = parse("path = \"/srv/exports/hplc\"\nprofile = \"hplc-a\"\n").unwrap();
        assert_eq!(f, WatchFolder::new("/srv/exports/hplc", "hplc-a"));
        assert_eq!(f.mode, WatchMode::Events);
        assert_eq!((f.poll_interval, f.settle), (5, 2000));
        assert!(f.validate(0).is_ok());
    }

    #[test]
    fn all_keys_parse() {
        let f = parse(
            "path = \"/mnt/share\"\nprofile = \"icp\"\nsite = \"north\"\nrecursive = true\n\
             mode = \"poll\"\npoll_interval = 30\nsettle = 500\nignore = [\"*.bak\"]\n",
        )
        .unwrap();
        assert_eq!(f.mode, WatchMode::Poll);
        assert!(f.recursive);
        assert_eq!(f.site.as_deref(), Some("north"));
        assert_eq!(f.ignore, vec!["*.bak".to_string()]);
    }

    #[test]
    fn unknown_keys_and_modes_are_refused() {
        assert!(parse("path = \"/a\"\nprofile = \"p\"\nsettel = 5\n").is_err());
        assert!(parse("path = \"/a\"\nprofile = \"p\"\nmode = \"inotify\"\n").is_err());
    }

    #[test]
    fn validation_names_the_key() {
        let mut f = WatchFolder::new("/a", "p");
        f.settle = 10;
        let msg = f.validate(2).unwrap_err().to_string();
        assert!(msg.starts_with("folders[2].settle:"), "{msg}");

        let mut f = WatchFolder::new("/a", "p");
        f.poll_interval = 0;
        assert!(
            f.validate(0)
                .unwrap_err()
                .to_string()
                .contains(".poll_interval:")
        );

        let f = WatchFolder::new("/a", "  ");
        assert!(f.validate(0).unwrap_err().to_string().contains(".profile:"));

        let f = WatchFolder::new("", "p");
        assert!(f.validate(0).unwrap_err().to_string().contains(".path:"));

        let mut f = WatchFolder::new("/a", "p");
        f.site = Some(String::new());
        assert!(f.validate(0).unwrap_err().to_string().contains(".site:"));
    }

    #[test]
    fn bad_patterns_are_refused() {
        let mut f = WatchFolder::new("/a", "p");
        f.ignore = vec!["[unclosed".into()];
        assert!(f.validate(0).unwrap_err().to_string().contains(".ignore:"));
        f.ignore = vec!["sub/*.csv".into()];
        assert!(f.validate(0).unwrap_err().to_string().contains("separator"));
    }

    #[test]
    fn default_patterns_match_incomplete_names() {
        let set = WatchFolder::new("/a", "p").ignore_set().unwrap();
        for name in [
            "run.tmp", "RUN.TMP", "a.part", "~lock", ".hidden", "x.swp", "x.csv~",
        ] {
            assert!(set.is_match(name), "{name} should be ignored");
        }
        for name in ["run.csv", "batch-17.txt", "a.partial.csv"] {
            assert!(!set.is_match(name), "{name} should be kept");
        }
    }
}

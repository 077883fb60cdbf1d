//! A profile's strftime layouts read once into chrono items.
//!
//! chrono's `parse_from_str` reads its layout string again on every call; a backfill reads
//! one `started_at` cell per file, so the layout was read as often as the value. Reading
//! with items gives the same values and refusals: `parse_from_str` is chrono's `parse`
//! over the layout's items into a fresh `Parsed`, which is what happens here.

use std::cell::OnceCell;

use chrono::format::{Item, Numeric, Pad, Parsed, StrftimeItems, parse};
use chrono::{Datelike, NaiveDate, NaiveDateTime, Timelike};

use super::profile::{
    DEFAULT_DATE_FORMAT, DEFAULT_DATETIME_FORMATS, DEFAULT_EARLIEST_DATE,
    DEFAULT_LATEST_DAYS_AHEAD, Profile,
};

/// The dates a profile finds plausible: from its earliest date to some days after the
/// present time, which the caller passes in as data (this module reads no clock). Without
/// a present time only the earliest date bounds the window.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(super) struct DateWindow {
    earliest: NaiveDateTime,
    latest: Option<NaiveDateTime>,
    days_ahead: u32,
}

impl DateWindow {
    pub(super) fn of(profile: &Profile, now: Option<NaiveDateTime>) -> DateWindow {
        let earliest = profile
            .earliest_date
            .as_deref()
            .and_then(|d| NaiveDate::parse_from_str(d, "%Y-%m-%d").ok())
            .or_else(|| NaiveDate::parse_from_str(DEFAULT_EARLIEST_DATE, "%Y-%m-%d").ok())
            .unwrap_or(NaiveDate::MIN)
            .and_time(chrono::NaiveTime::MIN);
        let days_ahead = profile
            .latest_days_ahead
            .unwrap_or(DEFAULT_LATEST_DAYS_AHEAD);
        let latest =
            now.and_then(|n| n.checked_add_signed(chrono::TimeDelta::days(days_ahead.into())));
        DateWindow {
            earliest,
            latest,
            days_ahead,
        }
    }

    /// `Ok` when `dt`, read from the cell text `text`, is plausible; else what was
    /// expected, naming the rule: a four-digit year without a sign, inside the window.
    pub(super) fn check(&self, text: &str, dt: NaiveDateTime) -> Result<(), String> {
        if text.starts_with(['+', '-']) || !(1000..=9999).contains(&dt.year()) {
            return Err("a date with a four-digit year and no sign".into());
        }
        let early = dt < self.earliest;
        let late = self.latest.is_some_and(|l| dt > l);
        if !(early || late) {
            return Ok(());
        }
        let from = iso_datetime(&self.earliest);
        Err(match self.latest {
            Some(l) => format!(
                "a date in the plausible window from {from} to {} (earliest_date to \
                 latest_days_ahead = {} day(s) after the present time)",
                iso_datetime(&l),
                self.days_ahead
            ),
            None => format!("a date from {from} on (earliest_date)"),
        })
    }
}

/// `%Y-%m-%dT%H:%M:%S` as items (a test checks them against chrono's reading).
const ISO_DATETIME: &[Item<'static>] = &[
    Item::Numeric(Numeric::Year, Pad::Zero),
    Item::Literal("-"),
    Item::Numeric(Numeric::Month, Pad::Zero),
    Item::Literal("-"),
    Item::Numeric(Numeric::Day, Pad::Zero),
    Item::Literal("T"),
    Item::Numeric(Numeric::Hour, Pad::Zero),
    Item::Literal(":"),
    Item::Numeric(Numeric::Minute, Pad::Zero),
    Item::Literal(":"),
    Item::Numeric(Numeric::Second, Pad::Zero),
];

/// `%Y-%m-%d` as items.
const ISO_DATE: &[Item<'static>] = &[
    Item::Numeric(Numeric::Year, Pad::Zero),
    Item::Literal("-"),
    Item::Numeric(Numeric::Month, Pad::Zero),
    Item::Literal("-"),
    Item::Numeric(Numeric::Day, Pad::Zero),
];

/// `dt` as chrono writes `%Y-%m-%dT%H:%M:%S`. Years of four digits are written here
/// (chrono's formatting machinery cost more than reading the value); others by chrono.
pub(super) fn iso_datetime(dt: &NaiveDateTime) -> String {
    let mut out = String::with_capacity(19);
    if !push_iso_date(&mut out, &dt.date()) {
        return dt.format_with_items(ISO_DATETIME.iter()).to_string();
    }
    let t = dt.time();
    out.push('T');
    push_two(&mut out, t.hour());
    out.push(':');
    push_two(&mut out, t.minute());
    out.push(':');
    // A leap second is kept as chrono writes it, as second 60.
    push_two(&mut out, t.second() + t.nanosecond() / 1_000_000_000);
    out
}

/// `d` as chrono writes `%Y-%m-%d`.
pub(super) fn iso_date(d: &NaiveDate) -> String {
    let mut out = String::with_capacity(10);
    if push_iso_date(&mut out, d) {
        out
    } else {
        d.format_with_items(ISO_DATE.iter()).to_string()
    }
}

/// Push `YYYY-MM-DD` for a year from 0 to 9999; false (nothing pushed) for other years,
/// which chrono writes with a sign.
fn push_iso_date(out: &mut String, d: &NaiveDate) -> bool {
    let Ok(year) = u32::try_from(d.year()) else {
        return false;
    };
    if year > 9999 {
        return false;
    }
    push_two(out, year / 100);
    push_two(out, year % 100);
    out.push('-');
    push_two(out, d.month());
    out.push('-');
    push_two(out, d.day());
    true
}

/// Two decimal digits of `v` (below 100).
fn push_two(out: &mut String, v: u32) {
    for digit in [v / 10 % 10, v % 10] {
        out.push(char::from(b'0' + (digit % 10) as u8));
    }
}

/// What a layout read from a cell.
pub(super) enum Read {
    DateTime(NaiveDateTime),
    /// The layout gave a date but no time of day.
    Date(NaiveDate),
}

/// One strftime layout, with its items read once.
pub(super) struct DateLayout {
    /// As the profile writes it, for messages.
    pub(super) text: String,
    /// `None` when not prepared, or when chrono cannot read the layout (a profile that was
    /// not validated): the layout string is then read for each value.
    items: Option<Vec<Item<'static>>>,
}

impl DateLayout {
    pub(super) fn new(text: &str) -> DateLayout {
        DateLayout {
            text: text.to_owned(),
            items: StrftimeItems::new(text).parse_to_owned().ok(),
        }
    }

    /// A layout whose string is read for every value: cheaper for one file's few values.
    fn unprepared(text: &str) -> DateLayout {
        DateLayout {
            text: text.to_owned(),
            items: None,
        }
    }

    /// The fields chrono reads from `s`. `NaiveDateTime::parse_from_str` and
    /// `NaiveDate::parse_from_str` both start with this same step, so one run serves both.
    fn parsed(&self, s: &str) -> Option<Parsed> {
        let mut parsed = Parsed::new();
        let ok = match &self.items {
            Some(items) => parse(&mut parsed, s, items.iter()),
            None => parse(&mut parsed, s, StrftimeItems::new(&self.text)),
        };
        ok.ok().map(|()| parsed)
    }

    /// A date and time, or else a date alone: `NaiveDateTime::parse_from_str`, then
    /// `NaiveDate::parse_from_str`.
    pub(super) fn read(&self, s: &str) -> Option<Read> {
        let p = self.parsed(s)?;
        match p.to_naive_datetime_with_offset(0) {
            Ok(dt) => Some(Read::DateTime(dt)),
            Err(_) => p.to_naive_date().ok().map(Read::Date),
        }
    }

    /// A date, or else the date of a date and time: `NaiveDate::parse_from_str`, then
    /// `NaiveDateTime::parse_from_str`.
    pub(super) fn read_date(&self, s: &str) -> Option<NaiveDate> {
        let p = self.parsed(s)?;
        p.to_naive_date()
            .ok()
            .or_else(|| p.to_naive_datetime_with_offset(0).ok().map(|dt| dt.date()))
    }
}

/// The date layouts of one profile, each made at its first use (a profile without a date
/// column never makes one).
pub(super) struct DateLayouts {
    prepared: bool,
    /// The present time, for the window's later bound (see [`DateWindow`]).
    pub(super) now: Option<NaiveDateTime>,
    datetime: OnceCell<Vec<DateLayout>>,
    date: OnceCell<DateLayout>,
}

impl DateLayouts {
    /// For many files: each layout is read into items once.
    pub(super) fn prepared() -> DateLayouts {
        DateLayouts {
            prepared: true,
            now: None,
            datetime: OnceCell::new(),
            date: OnceCell::new(),
        }
    }

    /// For one file: each value reads the layout string, as preparing would cost as much.
    pub(super) fn unprepared(now: Option<NaiveDateTime>) -> DateLayouts {
        DateLayouts {
            prepared: false,
            now,
            datetime: OnceCell::new(),
            date: OnceCell::new(),
        }
    }

    fn layout(&self, text: &str) -> DateLayout {
        if self.prepared {
            DateLayout::new(text)
        } else {
            DateLayout::unprepared(text)
        }
    }

    /// The layouts tried in turn for `started_at`. Always pass the same profile.
    pub(super) fn datetime(&self, profile: &Profile) -> &[DateLayout] {
        self.datetime
            .get_or_init(|| match &profile.datetime_format {
                Some(f) => vec![self.layout(f)],
                None => DEFAULT_DATETIME_FORMATS
                    .iter()
                    .map(|f| self.layout(f))
                    .collect(),
            })
            .as_slice()
    }

    /// The plausible dates of `profile` at this present time.
    pub(super) fn window(&self, profile: &Profile) -> DateWindow {
        DateWindow::of(profile, self.now)
    }

    /// The layout of `received`. Always pass the same profile.
    pub(super) fn date(&self, profile: &Profile) -> &DateLayout {
        self.date.get_or_init(|| {
            self.layout(
                profile
                    .date_format
                    .as_deref()
                    .unwrap_or(DEFAULT_DATE_FORMAT),
            )
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn iso_items_are_chronos_reading_of_the_layouts() {
        assert_eq!(
            StrftimeItems::new("%Y-%m-%dT%H:%M:%S")
                .parse()
                .ok()
                .as_deref(),
            Some(ISO_DATETIME)
        );
        assert_eq!(
            StrftimeItems::new("%Y-%m-%d").parse().ok().as_deref(),
            Some(ISO_DATE)
        );
    }

    /// The old per-value reading, kept here as the reference.
    fn by_string(s: &str, f: &str) -> (Option<String>, Option<String>) {
        let dt = NaiveDateTime::parse_from_str(s, f)
            .map(|dt| dt.format("%Y-%m-%dT%H:%M:%S").to_string())
            .ok()
            .or_else(|| {
                NaiveDate::parse_from_str(s, f)
                    .ok()
                    .map(|d| format!("{}T00:00:00", d.format("%Y-%m-%d")))
            });
        let d = NaiveDate::parse_from_str(s, f)
            .ok()
            .or_else(|| NaiveDateTime::parse_from_str(s, f).ok().map(|d| d.date()))
            .map(|d| d.format("%Y-%m-%d").to_string());
        (dt, d)
    }

    fn by_layout(l: &DateLayout, s: &str) -> (Option<String>, Option<String>) {
        let dt = l.read(s).map(|r| match r {
            Read::DateTime(dt) => iso_datetime(&dt),
            Read::Date(d) => format!("{}T00:00:00", iso_date(&d)),
        });
        (dt, l.read_date(s).map(|d| iso_date(&d)))
    }

    #[test]
    fn items_read_as_the_layout_string_does() {
        let layouts = [
            "%Y-%m-%dT%H:%M:%S",
            "%Y-%m-%d %H:%M:%S",
            "%Y-%m-%d",
            "%d.%m.%Y %H:%M",
            "%d.%m.%Y",
            "%m/%d/%y %I:%M %p",
            "%s",
            "%Y-%m-%d %H",
            "%Q-%",
            "%",
            "",
        ];
        let values = [
            "2026-01-04T06:31:00",
            "2026-01-04 06:31:00",
            "2026-01-04",
            "2026-01-04T06:31",
            "2026-02-30T06:31:00",
            "+12026-01-04T06:31:00",
            "-0044-03-15T12:00:00",
            "0044-03-15T12:00:00",
            "0000-01-01T00:00:00",
            "0999-12-31T23:59:59",
            "9999-12-31T23:59:59",
            "2016-12-31T23:59:60",
            "2016-12-31 23:59:60",
            "04.01.2026 06:31",
            "04.01.2026",
            "01/04/26 06:31 PM",
            "1767508260",
            "2026-01-04 06",
            " 2026-01-04",
            "2026-01-04T06:31:00Z",
            "",
            "x",
        ];
        for f in layouts {
            for v in values {
                let want = by_string(v, f);
                assert_eq!(by_layout(&DateLayout::new(f), v), want, "{v:?} in {f:?}");
                let once = DateLayout::unprepared(f);
                assert_eq!(by_layout(&once, v), want, "{v:?} in {f:?}, unprepared");
            }
        }
    }
}

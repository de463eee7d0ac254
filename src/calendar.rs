//! CF time coordinates: "hours since 1900-01-01 00:00:0.0" with a calendar
//! (CF conventions, section 4.4).
//!
//! A time value is a count of a fixed unit (second, minute, hour, day) since a
//! reference date in one of the CF calendars:
//!
//! - `standard` (alias `gregorian`, and the CF default when no calendar is
//!   given): Julian calendar up to 1582-10-04, Gregorian from 1582-10-15 on;
//!   the ten dates between do not exist. This is the mixed calendar itself,
//!   not an approximation; after 1582-10-15 it agrees with
//!   `proleptic_gregorian`.
//! - `proleptic_gregorian`: Gregorian leap rules for every year.
//! - `julian`: a leap year every fourth year.
//! - `noleap` / `365_day`, `all_leap` / `366_day`: every year 365 or 366 days.
//! - `360_day`: twelve months of 30 days.
//!
//! Years are numbered astronomically in every calendar: year 0 exists (it is
//! 1 BC) and -1 is 2 BC. Leap seconds are not counted (CF time units ignore
//! them, as udunits does).
//!
//! [`DateTime`] is a date label (year, month, day, hour, minute, second) with
//! the calendar it was read or decoded in. Labels order the same way in every
//! calendar, so comparison looks at the fields only; [`CfTimeUnits::encode`]
//! reads a label in the units' own calendar and refuses labels that do not
//! exist there (2001-02-29 in `noleap`, 2001-02-30 outside `360_day`).

use std::cmp::Ordering;
use std::fmt;
use std::ops::Range;
use std::str::FromStr;

const SECONDS_PER_DAY: f64 = 86_400.0;
const MICROSECONDS_PER_DAY: i64 = 86_400_000_000;
/// Largest time offset decoded, in seconds (about 3e8 years): far beyond any
/// data set, and small enough that years fit in an i32.
const MAXIMUM_SECONDS: f64 = 1e16;

// ---------------------------------------------------------------------------
// Errors
// ---------------------------------------------------------------------------

/// Errors of reading calendars, time units and dates, and of decoding values.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum CalendarError {
    /// A calendar name CF does not define, or one this module does not handle.
    #[error("unknown calendar {name:?}; expected one of standard, gregorian, proleptic_gregorian, noleap, 365_day, all_leap, 366_day, 360_day, julian")]
    UnknownCalendar { name: String },
    /// A problem in a time-units string other than its date.
    #[error("{found} at bytes {}..{} of time units {units:?}; expected {expected}", .span.start, .span.end)]
    TimeUnits {
        units: String,
        span: Range<usize>,
        found: String,
        expected: String,
    },
    /// A date or time that cannot be read. `text` is the whole string given
    /// (a date, or time units with the date inside) and `span` the place.
    #[error("{found} at bytes {}..{} of {text:?}; expected {expected}", .span.start, .span.end)]
    Date {
        text: String,
        span: Range<usize>,
        found: String,
        expected: String,
    },
    /// A date whose fields are out of range or that the calendar lacks.
    #[error("{date} does not exist in the {calendar} calendar: {reason}")]
    InvalidDate {
        date: String,
        calendar: Calendar,
        reason: String,
    },
    /// A time value that is NaN or infinite (a missing value, usually).
    #[error("time value {value} is not a finite number")]
    NonFinite { value: f64 },
    /// A time value too far from the reference to decode.
    #[error("time value {value} is too far from the reference date (more than 1e16 seconds)")]
    OutOfRange { value: f64 },
}

// ---------------------------------------------------------------------------
// Calendar
// ---------------------------------------------------------------------------

/// The CF calendars (CF conventions, section 4.4.1).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, serde::Serialize, serde::Deserialize)]
pub enum Calendar {
    /// Mixed Julian/Gregorian, Gregorian from 1582-10-15.
    Standard,
    ProlepticGregorian,
    Julian,
    /// 365 days every year.
    NoLeap,
    /// 366 days every year.
    AllLeap,
    /// Twelve months of 30 days.
    Day360,
}

/// How a calendar counts the days before a year.
#[derive(Clone, Copy)]
enum YearRule {
    Gregorian,
    Julian,
    Fixed(i64),
}

impl Calendar {
    /// A calendar from its CF name, in any letter case ("gregorian" is the
    /// deprecated alias of "standard", "365_day" of "noleap", "366_day" of
    /// "all_leap"). The empty string gives the CF default, `standard`.
    ///
    /// Fails with [`CalendarError::UnknownCalendar`] for other names
    /// (including CF's "none", which has no dates to decode).
    pub fn parse(name: &str) -> Result<Calendar, CalendarError> {
        let calendar = match name.trim().to_ascii_lowercase().as_str() {
            "" | "standard" | "gregorian" => Calendar::Standard,
            "proleptic_gregorian" => Calendar::ProlepticGregorian,
            "julian" => Calendar::Julian,
            "noleap" | "365_day" => Calendar::NoLeap,
            "all_leap" | "366_day" => Calendar::AllLeap,
            "360_day" => Calendar::Day360,
            _ => {
                return Err(CalendarError::UnknownCalendar {
                    name: name.to_string(),
                })
            }
        };
        Ok(calendar)
    }

    /// The CF name ("standard", "proleptic_gregorian", "noleap", ...).
    pub fn name(&self) -> &'static str {
        match self {
            Calendar::Standard => "standard",
            Calendar::ProlepticGregorian => "proleptic_gregorian",
            Calendar::Julian => "julian",
            Calendar::NoLeap => "noleap",
            Calendar::AllLeap => "all_leap",
            Calendar::Day360 => "360_day",
        }
    }

    /// Whether `year` has a 29 February. In `standard` the Julian rule holds
    /// before 1582 and the Gregorian from 1582 (1582 is common in both).
    /// Always false for `360_day`, which has 30-day Februaries instead.
    pub fn is_leap_year(&self, year: i32) -> bool {
        let year = i64::from(year);
        let julian = year.rem_euclid(4) == 0;
        let gregorian = julian && (year.rem_euclid(100) != 0 || year.rem_euclid(400) == 0);
        match self {
            Calendar::Standard => {
                if year < 1582 {
                    julian
                } else {
                    gregorian
                }
            }
            Calendar::ProlepticGregorian => gregorian,
            Calendar::Julian => julian,
            Calendar::NoLeap | Calendar::Day360 => false,
            Calendar::AllLeap => true,
        }
    }

    /// Number of day labels in a month (1..=12), `None` for other months. In
    /// `standard`, October 1582 still has labels 1 to 31 although 5 to 14 do
    /// not exist (see [`DateTime::new`]).
    pub fn days_in_month(&self, year: i32, month: u8) -> Option<u8> {
        if !(1..=12).contains(&month) {
            return None;
        }
        if *self == Calendar::Day360 {
            return Some(30);
        }
        let lengths = month_lengths(self.is_leap_year(year));
        Some(lengths[usize::from(month - 1)])
    }

    /// Number of days in a year (355 for 1582 in `standard`, which lost ten).
    pub fn days_in_year(&self, year: i32) -> i64 {
        day_number(*self, year, 1, 1).map_or(0, |start| {
            day_number(*self, year.saturating_add(1), 1, 1).map_or(0, |end| end - start)
        })
    }

    fn year_rule(&self) -> YearRule {
        match self {
            Calendar::Standard | Calendar::ProlepticGregorian => YearRule::Gregorian,
            Calendar::Julian => YearRule::Julian,
            Calendar::NoLeap => YearRule::Fixed(365),
            Calendar::AllLeap => YearRule::Fixed(366),
            Calendar::Day360 => YearRule::Fixed(360),
        }
    }
}

impl fmt::Display for Calendar {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

impl FromStr for Calendar {
    type Err = CalendarError;
    fn from_str(name: &str) -> Result<Calendar, CalendarError> {
        Calendar::parse(name)
    }
}

fn month_lengths(leap: bool) -> [u8; 12] {
    [
        31,
        if leap { 29 } else { 28 },
        31,
        30,
        31,
        30,
        31,
        31,
        30,
        31,
        30,
        31,
    ]
}

// ---------------------------------------------------------------------------
// Day numbers
// ---------------------------------------------------------------------------

/// Days from 0000-01-01 of the rule's own calendar to `year`-01-01.
fn days_before_year(rule: YearRule, year: i64) -> i64 {
    match rule {
        // Leap years in [0, year): multiples of 4, less multiples of 100,
        // plus multiples of 400 (year 0 is a leap year in both rules).
        YearRule::Gregorian => {
            365 * year + (year + 3).div_euclid(4) - (year + 99).div_euclid(100)
                + (year + 399).div_euclid(400)
        }
        YearRule::Julian => 365 * year + (year + 3).div_euclid(4),
        YearRule::Fixed(length) => length * year,
    }
}

fn rule_is_leap(rule: YearRule, year: i64) -> bool {
    days_before_year(rule, year + 1) - days_before_year(rule, year) == 366
}

/// Day number under one rule, counted from 0000-01-01 of that rule.
fn rule_day_number(rule: YearRule, year: i64, month: u8, day: u8) -> i64 {
    let before_month: i64 = match rule {
        YearRule::Fixed(360) => 30 * i64::from(month - 1),
        _ => month_lengths(rule_is_leap(rule, year))[..usize::from(month - 1)]
            .iter()
            .map(|&d| i64::from(d))
            .sum(),
    };
    days_before_year(rule, year) + before_month + i64::from(day) - 1
}

/// The inverse of `rule_day_number`.
fn rule_civil(rule: YearRule, number: i64) -> (i64, u8, u8) {
    // Estimate the year from the mean year length, then correct.
    let mut year = match rule {
        YearRule::Gregorian => (number * 400).div_euclid(146_097),
        YearRule::Julian => (number * 4).div_euclid(1461),
        YearRule::Fixed(length) => number.div_euclid(length),
    };
    while days_before_year(rule, year) > number {
        year -= 1;
    }
    while days_before_year(rule, year + 1) <= number {
        year += 1;
    }
    let mut remaining = number - days_before_year(rule, year);
    let lengths: [u8; 12] = match rule {
        YearRule::Fixed(360) => [30; 12],
        _ => month_lengths(rule_is_leap(rule, year)),
    };
    for (index, &length) in lengths.iter().enumerate() {
        if remaining < i64::from(length) {
            return (year, index as u8 + 1, remaining as u8 + 1);
        }
        remaining -= i64::from(length);
    }
    // Unreachable: `remaining` is below the year's length by construction.
    (year, 12, lengths[11])
}

/// Gregorian day number of 1582-10-15, the first Gregorian date of `standard`.
fn reform_day() -> i64 {
    rule_day_number(YearRule::Gregorian, 1582, 10, 15)
}

/// Added to a Julian day number to continue the Gregorian count: Julian
/// 1582-10-04 is the day before Gregorian 1582-10-15.
fn julian_shift() -> i64 {
    reform_day() - 1 - rule_day_number(YearRule::Julian, 1582, 10, 4)
}

fn in_reform_gap(year: i32, month: u8, day: u8) -> bool {
    year == 1582 && month == 10 && (5..=14).contains(&day)
}

/// Day number of a valid date in `calendar`: consecutive integers for
/// consecutive days. `None` inside the 1582 gap of `standard`.
fn day_number(calendar: Calendar, year: i32, month: u8, day: u8) -> Option<i64> {
    let y = i64::from(year);
    match calendar {
        Calendar::Standard => {
            if in_reform_gap(year, month, day) {
                None
            } else if (year, month, day) >= (1582, 10, 15) {
                Some(rule_day_number(YearRule::Gregorian, y, month, day))
            } else {
                Some(rule_day_number(YearRule::Julian, y, month, day) + julian_shift())
            }
        }
        other => Some(rule_day_number(other.year_rule(), y, month, day)),
    }
}

fn civil_from_day_number(calendar: Calendar, number: i64) -> (i64, u8, u8) {
    match calendar {
        Calendar::Standard => {
            if number >= reform_day() {
                rule_civil(YearRule::Gregorian, number)
            } else {
                rule_civil(YearRule::Julian, number - julian_shift())
            }
        }
        other => rule_civil(other.year_rule(), number),
    }
}

// ---------------------------------------------------------------------------
// DateTime
// ---------------------------------------------------------------------------

/// A date and time of day in a calendar. Seconds keep microseconds.
///
/// Equality and order compare the fields (year, month, day, hour, minute,
/// second) and not the calendar: a label sorts the same way in every
/// calendar, so "2026-10-14 06:00" typed by a user compares with times
/// decoded from a `noleap` file.
#[derive(Debug, Clone, Copy)]
pub struct DateTime {
    year: i32,
    month: u8,
    day: u8,
    hour: u8,
    minute: u8,
    second: f64,
    calendar: Calendar,
}

impl DateTime {
    /// A checked date and time. `second` is rounded to the microsecond.
    ///
    /// Fails with [`CalendarError::InvalidDate`] for a month outside 1..=12,
    /// a day beyond the month's length in `calendar` (29 February of a common
    /// year, 31 in `360_day`), the dates 1582-10-05 to 1582-10-14 of
    /// `standard`, an hour above 23, a minute above 59, or a second that is
    /// negative, not finite, or 60 and above (no leap seconds).
    pub fn new(
        year: i32,
        month: u8,
        day: u8,
        hour: u8,
        minute: u8,
        second: f64,
        calendar: Calendar,
    ) -> Result<DateTime, CalendarError> {
        let invalid = |reason: String| CalendarError::InvalidDate {
            date: format_label(year, month, day, hour, minute, second),
            calendar,
            reason,
        };
        let Some(month_length) = calendar.days_in_month(year, month) else {
            return Err(invalid(format!("month {month} is not in 1..=12")));
        };
        if day == 0 || day > month_length {
            return Err(invalid(format!(
                "day {day} is not in 1..={month_length} for month {month} of {year}"
            )));
        }
        if calendar == Calendar::Standard && in_reform_gap(year, month, day) {
            return Err(invalid(
                "the Gregorian reform went from 1582-10-04 straight to 1582-10-15".into(),
            ));
        }
        if hour > 23 {
            return Err(invalid(format!("hour {hour} is not in 0..=23")));
        }
        if minute > 59 {
            return Err(invalid(format!("minute {minute} is not in 0..=59")));
        }
        let rounded = (second * 1e6).round() / 1e6;
        if !(rounded.is_finite() && (0.0..60.0).contains(&rounded)) {
            return Err(invalid(format!(
                "second {second} is not in 0 to below 60 (leap seconds are not counted)"
            )));
        }
        Ok(DateTime {
            year,
            month,
            day,
            hour,
            minute,
            second: rounded,
            calendar,
        })
    }

    /// Read "YYYY-MM-DD", "YYYY-MM-DD HH:MM", "YYYY-MM-DDTHH:MM:SS" (a space
    /// or a `T` before the time; month, day, hour and minute may have one
    /// digit; seconds may have a fraction), with an optional time zone: `Z`,
    /// `UTC`, or an offset such as `+01:00`, `-6:00` or `+0530`, which is
    /// taken off so the result is in UTC. The year may be negative
    /// (astronomical numbering). The calendar is `standard`.
    ///
    /// Fails with [`CalendarError::Date`] (byte span, what was found and
    /// expected) for text of another shape, and [`CalendarError::InvalidDate`]
    /// for dates that do not exist.
    pub fn parse(text: &str) -> Result<DateTime, CalendarError> {
        DateTime::parse_in(text, Calendar::Standard)
    }

    /// [`DateTime::parse`] in a given calendar ("2001-02-30" exists only in
    /// `360_day`). Fails as `parse` does.
    pub fn parse_in(text: &str, calendar: Calendar) -> Result<DateTime, CalendarError> {
        parse_date_text(text, 0, text, calendar)
    }

    pub fn year(&self) -> i32 {
        self.year
    }
    pub fn month(&self) -> u8 {
        self.month
    }
    pub fn day(&self) -> u8 {
        self.day
    }
    pub fn hour(&self) -> u8 {
        self.hour
    }
    pub fn minute(&self) -> u8 {
        self.minute
    }
    /// Seconds with their fraction (microsecond resolution).
    pub fn second(&self) -> f64 {
        self.second
    }
    pub fn calendar(&self) -> Calendar {
        self.calendar
    }

    /// The same label read in another calendar.
    ///
    /// Fails with [`CalendarError::InvalidDate`] when the label does not
    /// exist there (2000-02-30 outside `360_day`, 2001-02-29 in `noleap`).
    pub fn with_calendar(&self, calendar: Calendar) -> Result<DateTime, CalendarError> {
        DateTime::new(
            self.year,
            self.month,
            self.day,
            self.hour,
            self.minute,
            self.second,
            calendar,
        )
    }

    /// The date and time `seconds` later (earlier if negative) in the same
    /// calendar, rounded to the microsecond.
    ///
    /// Fails with [`CalendarError::NonFinite`] for NaN or infinite seconds
    /// and [`CalendarError::OutOfRange`] beyond 1e16 seconds.
    pub fn add_seconds(&self, seconds: f64) -> Result<DateTime, CalendarError> {
        if !seconds.is_finite() {
            return Err(CalendarError::NonFinite { value: seconds });
        }
        if seconds.abs() > MAXIMUM_SECONDS {
            return Err(CalendarError::OutOfRange { value: seconds });
        }
        let start = self.day_number();
        // Whole days and the rest kept apart, so that microseconds survive
        // however far the day number is from zero.
        let total = self.second_of_day() + seconds;
        let whole_days = (total / SECONDS_PER_DAY).floor();
        let mut microseconds = ((total - whole_days * SECONDS_PER_DAY) * 1e6).round() as i64;
        let mut number = start + whole_days as i64;
        if microseconds >= MICROSECONDS_PER_DAY {
            microseconds -= MICROSECONDS_PER_DAY;
            number += 1;
        } else if microseconds < 0 {
            microseconds += MICROSECONDS_PER_DAY;
            number -= 1;
        }
        let (year, month, day) = civil_from_day_number(self.calendar, number);
        let year = i32::try_from(year).map_err(|_| CalendarError::OutOfRange { value: seconds })?;
        let hour = (microseconds / 3_600_000_000) as u8;
        let minute = (microseconds / 60_000_000 % 60) as u8;
        let second = (microseconds % 60_000_000) as f64 / 1e6;
        DateTime::new(year, month, day, hour, minute, second, self.calendar)
    }

    /// Seconds from `earlier` to `self`, reading `earlier` in this calendar.
    ///
    /// Fails with [`CalendarError::InvalidDate`] if `earlier` does not exist
    /// in this calendar.
    pub fn seconds_since(&self, earlier: &DateTime) -> Result<f64, CalendarError> {
        let earlier = earlier.with_calendar(self.calendar)?;
        let days = self.day_number() - earlier.day_number();
        Ok(days as f64 * SECONDS_PER_DAY + (self.second_of_day() - earlier.second_of_day()))
    }

    /// Valid by construction, so the day number exists.
    fn day_number(&self) -> i64 {
        day_number(self.calendar, self.year, self.month, self.day).unwrap_or_default()
    }

    fn second_of_day(&self) -> f64 {
        f64::from(self.hour) * 3600.0 + f64::from(self.minute) * 60.0 + self.second
    }

    fn fields(&self) -> (i32, u8, u8, u8, u8) {
        (self.year, self.month, self.day, self.hour, self.minute)
    }
}

/// ISO 8601 without a zone: "2026-10-14T06:00:00", a fraction of a second
/// only when there is one ("...T00:00:42.5"), a minus sign for years before
/// year 0.
impl fmt::Display for DateTime {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&format_label(
            self.year,
            self.month,
            self.day,
            self.hour,
            self.minute,
            self.second,
        ))
    }
}

fn format_label(year: i32, month: u8, day: u8, hour: u8, minute: u8, second: f64) -> String {
    let sign = if year < 0 { "-" } else { "" };
    let year = year.unsigned_abs();
    let microseconds = if second.is_finite() {
        (second * 1e6).round() as i64
    } else {
        0
    };
    let whole = microseconds / 1_000_000;
    let fraction = microseconds % 1_000_000;
    let seconds = if fraction == 0 {
        format!("{whole:02}")
    } else {
        let digits = format!("{fraction:06}");
        format!("{whole:02}.{}", digits.trim_end_matches('0'))
    };
    format!("{sign}{year:04}-{month:02}-{day:02}T{hour:02}:{minute:02}:{seconds}")
}

impl PartialEq for DateTime {
    fn eq(&self, other: &Self) -> bool {
        self.partial_cmp(other) == Some(Ordering::Equal)
    }
}

impl PartialOrd for DateTime {
    fn partial_cmp(&self, other: &Self) -> Option<Ordering> {
        match self.fields().cmp(&other.fields()) {
            Ordering::Equal => self.second.partial_cmp(&other.second),
            unequal => Some(unequal),
        }
    }
}

impl FromStr for DateTime {
    type Err = CalendarError;
    fn from_str(text: &str) -> Result<DateTime, CalendarError> {
        DateTime::parse(text)
    }
}

// ---------------------------------------------------------------------------
// Date text
// ---------------------------------------------------------------------------

/// A cursor over date text. `base` is the byte offset of `text` inside
/// `whole`, the string errors quote.
struct DateCursor<'a> {
    whole: &'a str,
    text: &'a str,
    base: usize,
    position: usize,
}

impl<'a> DateCursor<'a> {
    fn peek(&self) -> Option<char> {
        self.text[self.position..].chars().next()
    }

    fn bump(&mut self) {
        if let Some(c) = self.peek() {
            self.position += c.len_utf8();
        }
    }

    fn skip_whitespace(&mut self) -> bool {
        let start = self.position;
        while self.peek().is_some_and(char::is_whitespace) {
            self.bump();
        }
        self.position > start
    }

    fn error(&self, expected: &str) -> CalendarError {
        let start = self.base + self.position;
        let (span, found) = match self.peek() {
            Some(c) => (start..start + c.len_utf8(), format!("unexpected {c:?}")),
            None => (start..start, "the text ends".to_string()),
        };
        CalendarError::Date {
            text: self.whole.to_string(),
            span,
            found,
            expected: expected.to_string(),
        }
    }

    /// One or more ASCII digits, at most `max` of them, as a number.
    fn digits(&mut self, max: usize, expected: &str) -> Result<i64, CalendarError> {
        let start = self.position;
        while self.peek().is_some_and(|c| c.is_ascii_digit()) && self.position - start < max {
            self.bump();
        }
        if self.position == start {
            return Err(self.error(expected));
        }
        self.text[start..self.position]
            .parse::<i64>()
            .map_err(|_| self.error(expected))
    }

    fn expect(&mut self, c: char, expected: &str) -> Result<(), CalendarError> {
        if self.peek() == Some(c) {
            self.bump();
            Ok(())
        } else {
            Err(self.error(expected))
        }
    }
}

const EXPECTED_DATE: &str = "a date as YYYY-MM-DD (month and day may have one digit)";

fn small(value: i64) -> u8 {
    u8::try_from(value).unwrap_or(u8::MAX)
}

/// Parse `text` (found at byte `base` of `whole`) as a date, optional time and
/// optional zone, in `calendar`; the result is in UTC.
fn parse_date_text(
    whole: &str,
    base: usize,
    text: &str,
    calendar: Calendar,
) -> Result<DateTime, CalendarError> {
    let mut cursor = DateCursor {
        whole,
        text,
        base,
        position: 0,
    };
    cursor.skip_whitespace();
    let negative = match cursor.peek() {
        Some('-') => {
            cursor.bump();
            true
        }
        Some('+') => {
            cursor.bump();
            false
        }
        _ => false,
    };
    let year = cursor.digits(9, EXPECTED_DATE)?;
    let year = if negative { -year } else { year };
    cursor.expect('-', "'-' between year and month (YYYY-MM-DD)")?;
    let month = cursor.digits(2, "a month of one or two digits")?;
    cursor.expect('-', "'-' between month and day (YYYY-MM-DD)")?;
    let day = cursor.digits(2, "a day of one or two digits")?;

    let (mut hour, mut minute, mut second) = (0, 0, 0.0);
    let t_separator = cursor.peek() == Some('T');
    let separated = if t_separator {
        cursor.bump();
        true
    } else {
        cursor.skip_whitespace()
    };
    let time_follows = cursor.peek().is_some_and(|c| c.is_ascii_digit());
    if t_separator && !time_follows {
        return Err(cursor.error("a time as HH:MM or HH:MM:SS after 'T'"));
    }
    if separated && time_follows {
        hour = cursor.digits(2, "an hour of one or two digits")?;
        if cursor.peek() == Some(':') {
            cursor.bump();
            minute = cursor.digits(2, "minutes of one or two digits")?;
            if cursor.peek() == Some(':') {
                cursor.bump();
                let start = cursor.position;
                cursor.digits(2, "seconds of one or two digits")?;
                if cursor.peek() == Some('.') {
                    cursor.bump();
                    while cursor.peek().is_some_and(|c| c.is_ascii_digit()) {
                        cursor.bump();
                    }
                }
                second = cursor.text[start..cursor.position]
                    .parse::<f64>()
                    .map_err(|_| cursor.error("seconds such as 00, 42 or 42.5"))?;
            }
        }
    }

    // Time zone: Z, UTC, GMT, or +HH[:MM] / -HH[:MM] / +HHMM.
    cursor.skip_whitespace();
    let mut zone_minutes: i64 = 0;
    let rest = &cursor.text[cursor.position..];
    if rest.starts_with('Z') {
        cursor.bump();
    } else if rest.starts_with("UTC") || rest.starts_with("GMT") {
        cursor.position += 3;
    } else if let Some(sign) = cursor.peek().filter(|c| *c == '+' || *c == '-') {
        cursor.bump();
        let start = cursor.position;
        let hours = cursor.digits(2, "a time-zone offset such as +01:00, -6:00 or +0530")?;
        let mut minutes = 0;
        if cursor.peek() == Some(':') {
            cursor.bump();
            minutes = cursor.digits(2, "the minutes of the time-zone offset")?;
        } else if cursor.peek().is_some_and(|c| c.is_ascii_digit()) && cursor.position - start == 2
        {
            minutes = cursor.digits(2, "the minutes of the time-zone offset")?;
        }
        if !(0..=23).contains(&hours) || !(0..=59).contains(&minutes) {
            cursor.position = start;
            return Err(cursor.error("a time-zone offset of at most 23:59"));
        }
        zone_minutes = (hours * 60 + minutes) * if sign == '-' { -1 } else { 1 };
    }
    cursor.skip_whitespace();
    if cursor.peek().is_some() {
        return Err(
            cursor.error("the end of the date, or a time (HH:MM[:SS]) and a zone (Z, UTC, +HH:MM)")
        );
    }

    let year = i32::try_from(year).map_err(|_| {
        cursor.position = 0;
        cursor.error("a year that fits in 32 bits")
    })?;
    let local = DateTime::new(
        year,
        small(month),
        small(day),
        small(hour),
        small(minute),
        second,
        calendar,
    )?;
    if zone_minutes == 0 {
        Ok(local)
    } else {
        // Local time = UTC + offset.
        local.add_seconds(-(zone_minutes as f64) * 60.0)
    }
}

// ---------------------------------------------------------------------------
// CF time units
// ---------------------------------------------------------------------------

/// The unit a CF time value counts.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, serde::Serialize, serde::Deserialize)]
pub enum TimeUnit {
    Microsecond,
    Millisecond,
    Second,
    Minute,
    Hour,
    Day,
}

impl TimeUnit {
    /// Seconds in one unit (a day is 86400 s: CF time ignores leap seconds).
    pub fn seconds(&self) -> f64 {
        match self {
            TimeUnit::Microsecond => 1e-6,
            TimeUnit::Millisecond => 1e-3,
            TimeUnit::Second => 1.0,
            TimeUnit::Minute => 60.0,
            TimeUnit::Hour => 3600.0,
            TimeUnit::Day => 86_400.0,
        }
    }

    /// The plural word CF files use ("hours").
    pub fn name(&self) -> &'static str {
        match self {
            TimeUnit::Microsecond => "microseconds",
            TimeUnit::Millisecond => "milliseconds",
            TimeUnit::Second => "seconds",
            TimeUnit::Minute => "minutes",
            TimeUnit::Hour => "hours",
            TimeUnit::Day => "days",
        }
    }

    /// A udunits spelling of the unit, any letter case.
    fn from_word(word: &str) -> Option<TimeUnit> {
        let unit = match word.to_ascii_lowercase().as_str() {
            "microsecond" | "microseconds" | "us" | "usec" | "usecs" => TimeUnit::Microsecond,
            "millisecond" | "milliseconds" | "ms" | "msec" | "msecs" => TimeUnit::Millisecond,
            "second" | "seconds" | "s" | "sec" | "secs" => TimeUnit::Second,
            "minute" | "minutes" | "min" | "mins" => TimeUnit::Minute,
            "hour" | "hours" | "h" | "hr" | "hrs" => TimeUnit::Hour,
            "day" | "days" | "d" => TimeUnit::Day,
            _ => return None,
        };
        Some(unit)
    }
}

/// Time units of a CF time coordinate: a unit, a reference date in UTC and
/// a calendar.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CfTimeUnits {
    unit: TimeUnit,
    reference: DateTime,
    calendar: Calendar,
}

const EXPECTED_TIME_UNITS: &str =
    "time units as \"<unit> since <date>\", such as \"hours since 1900-01-01 00:00:0.0\"";

impl CfTimeUnits {
    /// Read the `units` and `calendar` attributes of a CF time coordinate:
    /// "hours since 1900-01-01 00:00:0.0", "days since 2000-1-1",
    /// "seconds since 1970-01-01T00:00:00Z", "seconds since 1992-10-8
    /// 15:15:42.5 -6:00" (the zone is taken off: the reference is kept in
    /// UTC). Units: microseconds, milliseconds, seconds, minutes, hours, days
    /// with their udunits abbreviations. An empty calendar is `standard`.
    ///
    /// Fails with [`CalendarError::UnknownCalendar`];
    /// [`CalendarError::TimeUnits`] for an unknown or missing unit, a missing
    /// "since", or months and years (their length varies, CF advises
    /// against them); [`CalendarError::Date`] or
    /// [`CalendarError::InvalidDate`] for the reference date.
    pub fn parse(units: &str, calendar: &str) -> Result<CfTimeUnits, CalendarError> {
        let calendar = Calendar::parse(calendar)?;
        let error = |span: Range<usize>, found: String, expected: &str| CalendarError::TimeUnits {
            units: units.to_string(),
            span,
            found,
            expected: expected.to_string(),
        };
        let unit_start = units.len() - units.trim_start().len();
        let unit_end = units[unit_start..]
            .find(char::is_whitespace)
            .map_or(units.len(), |i| unit_start + i);
        let word = &units[unit_start..unit_end];
        if word.is_empty() {
            return Err(error(
                unit_start..unit_start,
                "empty time units".into(),
                EXPECTED_TIME_UNITS,
            ));
        }
        let unit = match TimeUnit::from_word(word) {
            Some(unit) => unit,
            None => {
                let lower = word.to_ascii_lowercase();
                let expected = if matches!(
                    lower.as_str(),
                    "month"
                        | "months"
                        | "year"
                        | "years"
                        | "yr"
                        | "a"
                        | "common_year"
                        | "common_years"
                ) {
                    "a unit of fixed length (seconds, minutes, hours or days); months and years vary in length and CF advises against them"
                } else {
                    "a time unit: seconds, minutes, hours or days (or s, min, h, d, milliseconds, microseconds)"
                };
                return Err(error(
                    unit_start..unit_end,
                    format!("unit {word:?}"),
                    expected,
                ));
            }
        };
        let after_unit = &units[unit_end..];
        let since_start = unit_end + (after_unit.len() - after_unit.trim_start().len());
        let since_end = units[since_start..]
            .find(char::is_whitespace)
            .map_or(units.len(), |i| since_start + i);
        let since = &units[since_start..since_end];
        if !since.eq_ignore_ascii_case("since") {
            let found = if since.is_empty() {
                "no reference date".to_string()
            } else {
                format!("{since:?}")
            };
            return Err(error(
                since_start..since_end,
                found,
                "\"since\" and a reference date (a bare duration unit is a unit, not a time coordinate)",
            ));
        }
        let reference = parse_date_text(units, since_end, &units[since_end..], calendar)?;
        Ok(CfTimeUnits {
            unit,
            reference,
            calendar,
        })
    }

    /// Time units from parts; `reference` is read in `calendar`.
    ///
    /// Fails with [`CalendarError::InvalidDate`] if the reference does not
    /// exist in `calendar`.
    pub fn new(
        unit: TimeUnit,
        reference: DateTime,
        calendar: Calendar,
    ) -> Result<CfTimeUnits, CalendarError> {
        Ok(CfTimeUnits {
            unit,
            reference: reference.with_calendar(calendar)?,
            calendar,
        })
    }

    pub fn unit(&self) -> TimeUnit {
        self.unit
    }
    /// The reference date, in UTC.
    pub fn reference(&self) -> DateTime {
        self.reference
    }
    pub fn calendar(&self) -> Calendar {
        self.calendar
    }

    /// The date a time value stands for, to the microsecond.
    ///
    /// Fails with [`CalendarError::NonFinite`] for NaN or infinite values
    /// (missing data: keep them missing rather than decode them) and
    /// [`CalendarError::OutOfRange`] beyond 1e16 seconds from the reference.
    pub fn decode(&self, value: f64) -> Result<DateTime, CalendarError> {
        if !value.is_finite() {
            return Err(CalendarError::NonFinite { value });
        }
        let seconds = value * self.unit.seconds();
        if seconds.abs() > MAXIMUM_SECONDS {
            return Err(CalendarError::OutOfRange { value });
        }
        self.reference
            .add_seconds(seconds)
            .map_err(|_| CalendarError::OutOfRange { value })
    }

    /// The time value of a date. The date's fields are read in these units'
    /// calendar, whatever calendar it came with (see the module notes).
    ///
    /// Fails with [`CalendarError::InvalidDate`] when the date does not exist
    /// in this calendar.
    pub fn encode(&self, datetime: &DateTime) -> Result<f64, CalendarError> {
        let date = datetime.with_calendar(self.calendar)?;
        Ok(date.seconds_since(&self.reference)? / self.unit.seconds())
    }
}

/// "hours since 1900-01-01 00:00:00", the CF form (the calendar is a
/// separate attribute: see [`CfTimeUnits::calendar`]).
impl fmt::Display for CfTimeUnits {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let label = self.reference.to_string().replacen('T', " ", 1);
        write!(f, "{} since {}", self.unit.name(), label)
    }
}

// ---------------------------------------------------------------------------
// Tests
// ---------------------------------------------------------------------------

#[cfg(test)]
mod tests {
    use super::*;

    fn units(text: &str, calendar: &str) -> CfTimeUnits {
        CfTimeUnits::parse(text, calendar).unwrap_or_else(|e| panic!("{text:?} ({calendar}): {e}"))
    }

    fn decoded(text: &str, calendar: &str, value: f64) -> String {
        units(text, calendar).decode(value).unwrap().to_string()
    }

    fn date(text: &str) -> DateTime {
        DateTime::parse(text).unwrap_or_else(|e| panic!("{text:?}: {e}"))
    }

    #[test]
    fn a_million_hours_after_1900() {
        // Python datetime (proleptic Gregorian, agrees with standard after
        // 1582), checked in a scratch shell:
        // datetime(1900,1,1) + timedelta(hours=1_000_000) = 2014-01-29 16:00.
        let u = units("hours since 1900-01-01 00:00:0.0", "standard");
        assert_eq!(
            u.decode(1_000_000.0).unwrap().to_string(),
            "2014-01-29T16:00:00"
        );
        assert_eq!(u.encode(&date("2014-01-29 16:00")).unwrap(), 1_000_000.0);
        // Python: (datetime(2026,10,14,6) - datetime(1900,1,1)) / 1 h = 1111374.
        assert_eq!(u.encode(&date("2026-10-14 06:00")).unwrap(), 1_111_374.0);
        assert_eq!(
            decoded("hours since 1900-01-01 00:00:0.0", "gregorian", 1_111_374.0),
            "2026-10-14T06:00:00"
        );
    }

    #[test]
    fn agrees_with_python_datetime() {
        // Python datetime is proleptic Gregorian; values from
        // `datetime(1850, 1, 1) + timedelta(hours=v)` and
        // `datetime(1601, 1, 1) + timedelta(days=v)` in a scratch shell.
        let cases = [
            ("hours since 1850-01-01", 1_234_567.0, "1990-11-03T07:00:00"),
            (
                "hours since 1850-01-01",
                2_000_000.25,
                "2078-02-27T08:15:00",
            ),
            ("hours since 1850-01-01", 87_654.5, "1860-01-01T06:30:00"),
            ("hours since 1850-01-01", 3_333_333.0, "2230-04-07T21:00:00"),
            ("hours since 1850-01-01", 1_499_999.5, "2021-02-12T23:30:00"),
            ("days since 1601-01-01", 146_097.0, "2001-01-01T00:00:00"),
            ("days since 1601-01-01", 150_000.0, "2011-09-09T00:00:00"),
            ("days since 1601-01-01", 160_000.75, "2039-01-25T18:00:00"),
        ];
        for calendar in ["standard", "proleptic_gregorian"] {
            for (text, value, expected) in cases {
                assert_eq!(
                    decoded(text, calendar, value),
                    expected,
                    "{text} {value} {calendar}"
                );
                assert_eq!(
                    units(text, calendar).encode(&date(expected)).unwrap(),
                    value
                );
            }
        }
    }

    #[test]
    fn unix_seconds() {
        // 1e9 seconds after 1970-01-01T00:00:00Z is 2001-09-09T01:46:40 UTC
        // (a well-known value; Python datetime agrees).
        assert_eq!(
            decoded(
                "seconds since 1970-01-01T00:00:00Z",
                "proleptic_gregorian",
                1e9
            ),
            "2001-09-09T01:46:40"
        );
        assert_eq!(
            decoded("seconds since 1970-01-01 00:00:00 UTC", "standard", 0.0),
            "1970-01-01T00:00:00"
        );
    }

    #[test]
    fn time_zone_of_the_reference_is_taken_off() {
        // CF conventions section 4.4: "seconds since 1992-10-8 15:15:42.5
        // -6:00" is 15:15:42.5 six hours west of UTC, so 21:15:42.5 UTC
        // (Python datetime agrees).
        let u = units("seconds since 1992-10-8 15:15:42.5 -6:00", "standard");
        assert_eq!(u.reference().to_string(), "1992-10-08T21:15:42.5");
        assert_eq!(u.decode(0.0).unwrap().to_string(), "1992-10-08T21:15:42.5");
        // An east offset crossing midnight backwards: 00:30 at +01:00 is
        // 23:30 UTC the day before (arithmetic of the offset definition).
        assert_eq!(
            date("2000-03-01 00:30 +01:00").to_string(),
            "2000-02-29T23:30:00"
        );
        assert_eq!(date("2000-03-01 00:30 +0100"), date("2000-02-29T23:30:00Z"));
    }

    #[test]
    fn gregorian_leap_years() {
        // Gregorian rule (fact of the trade): every fourth year, except
        // centuries not divisible by 400. 2000 is leap, 1900 is not.
        let gregorian = Calendar::ProlepticGregorian;
        assert!(gregorian.is_leap_year(2000));
        assert!(!gregorian.is_leap_year(1900));
        assert!(gregorian.is_leap_year(2024));
        assert!(!gregorian.is_leap_year(2023));
        assert!(!gregorian.is_leap_year(2100));
        assert!(gregorian.is_leap_year(0));
        assert!(gregorian.is_leap_year(-4));
        assert_eq!(
            decoded("days since 2000-01-01", "standard", 59.0),
            "2000-02-29T00:00:00"
        );
        assert_eq!(
            decoded("days since 1900-01-01", "standard", 59.0),
            "1900-03-01T00:00:00"
        );
        assert_eq!(
            decoded("days since 2000-1-1", "standard", 366.0),
            "2001-01-01T00:00:00"
        );
        assert_eq!(gregorian.days_in_year(2000), 366);
        assert_eq!(gregorian.days_in_year(1900), 365);
        // 400 Gregorian years hold 146097 days (365 * 400 + 97 leap days).
        let u = units("days since 2000-01-01", "proleptic_gregorian");
        assert_eq!(u.encode(&date("2400-01-01")).unwrap(), 146_097.0);
    }

    #[test]
    fn julian_leap_years() {
        // Julian rule: every fourth year, 1900 included.
        assert!(Calendar::Julian.is_leap_year(1900));
        assert_eq!(
            decoded("days since 1900-01-01", "julian", 59.0),
            "1900-02-29T00:00:00"
        );
        // Four Julian years hold 1461 days.
        let u = units("days since 1900-01-01", "julian");
        assert_eq!(u.encode(&date("1904-01-01")).unwrap(), 1461.0);
        assert_eq!(u.encode(&date("2000-01-01")).unwrap(), 36_525.0);
    }

    #[test]
    fn noleap_years_have_365_days() {
        let u = units("days since 2000-01-01", "noleap");
        assert_eq!(u.decode(59.0).unwrap().to_string(), "2000-03-01T00:00:00");
        assert_eq!(u.decode(365.0).unwrap().to_string(), "2001-01-01T00:00:00");
        assert_eq!(u.encode(&date("2100-01-01")).unwrap(), 365.0 * 100.0);
        assert_eq!(Calendar::parse("365_day").unwrap(), Calendar::NoLeap);
        assert!(matches!(
            DateTime::parse_in("2000-02-29", Calendar::NoLeap),
            Err(CalendarError::InvalidDate { .. })
        ));
        // A date typed in the standard calendar that noleap lacks.
        assert!(matches!(
            u.encode(&date("2000-02-29")),
            Err(CalendarError::InvalidDate { .. })
        ));
        assert_eq!(Calendar::NoLeap.days_in_year(2000), 365);
    }

    #[test]
    fn all_leap_years_have_366_days() {
        let u = units("days since 2001-01-01", "all_leap");
        assert_eq!(u.decode(59.0).unwrap().to_string(), "2001-02-29T00:00:00");
        assert_eq!(u.decode(366.0).unwrap().to_string(), "2002-01-01T00:00:00");
        assert_eq!(Calendar::parse("366_day").unwrap(), Calendar::AllLeap);
        assert_eq!(Calendar::AllLeap.days_in_year(2001), 366);
    }

    #[test]
    fn day_360_months_have_30_days() {
        let u = units("days since 2000-01-01", "360_day");
        assert_eq!(u.decode(30.0).unwrap().to_string(), "2000-02-01T00:00:00");
        assert_eq!(u.decode(59.0).unwrap().to_string(), "2000-02-30T00:00:00");
        assert_eq!(u.decode(359.0).unwrap().to_string(), "2000-12-30T00:00:00");
        assert_eq!(u.decode(360.0).unwrap().to_string(), "2001-01-01T00:00:00");
        assert_eq!(u.decode(-1.0).unwrap().to_string(), "1999-12-30T00:00:00");
        let thirtieth = DateTime::parse_in("2000-02-30", Calendar::Day360).unwrap();
        assert_eq!(u.encode(&thirtieth).unwrap(), 59.0);
        assert!(DateTime::parse_in("2000-01-31", Calendar::Day360).is_err());
        assert!(DateTime::parse("2000-02-30").is_err());
        assert_eq!(Calendar::Day360.days_in_month(2000, 2), Some(30));
    }

    #[test]
    fn standard_calendar_skips_ten_days_in_1582() {
        // The Gregorian reform (1582): Thursday 4 October was followed by
        // Friday 15 October (fact of the calendar's history).
        assert_eq!(
            decoded("days since 1582-10-04", "standard", 1.0),
            "1582-10-15T00:00:00"
        );
        assert_eq!(
            decoded("days since 1582-10-15", "standard", -1.0),
            "1582-10-04T00:00:00"
        );
        assert_eq!(
            decoded("days since 1582-10-04", "proleptic_gregorian", 1.0),
            "1582-10-05T00:00:00"
        );
        assert_eq!(
            decoded("days since 1582-10-04", "julian", 1.0),
            "1582-10-05T00:00:00"
        );
        assert!(matches!(
            DateTime::parse("1582-10-10"),
            Err(CalendarError::InvalidDate { .. })
        ));
        assert!(DateTime::parse_in("1582-10-10", Calendar::ProlepticGregorian).is_ok());
        // 1582 lost ten days: 355 days in standard.
        assert_eq!(Calendar::Standard.days_in_year(1582), 355);
        // Before the reform the standard calendar is Julian: 1500 is leap.
        assert!(Calendar::Standard.is_leap_year(1500));
        assert!(!Calendar::ProlepticGregorian.is_leap_year(1500));
        assert_eq!(
            decoded("days since 1500-02-28", "standard", 1.0),
            "1500-02-29T00:00:00"
        );
        // Around year 1 the Gregorian count runs two days behind the Julian:
        // Julian 0001-01-01 is proleptic Gregorian 0000-12-30 (derived from
        // the leap rules; the same shift as `julian_shift`).
        assert_eq!(julian_shift(), -2);
    }

    #[test]
    fn julian_day_numbers() {
        // Julian Day 0 is noon of 1 January 4713 BC in the proleptic Julian
        // calendar (-4712 in astronomical years), which is 24 November 4714 BC
        // (-4713) proleptic Gregorian; J2000.0, 2000-01-01 12:00, is JD
        // 2451545.0 (IAU; facts of astronomy). The reform date 1582-10-15
        // 00:00 is JD 2299160.5 (value from memory; consistent with the rest).
        let mixed = units("days since -4712-01-01 12:00:00", "standard");
        assert_eq!(
            mixed.encode(&date("2000-01-01 12:00")).unwrap(),
            2_451_545.0
        );
        assert_eq!(mixed.encode(&date("1582-10-15")).unwrap(), 2_299_160.5);
        assert_eq!(
            mixed.decode(2_451_545.0).unwrap().to_string(),
            "2000-01-01T12:00:00"
        );
        let proleptic = units("days since -4713-11-24 12:00:00", "proleptic_gregorian");
        assert_eq!(
            proleptic.encode(&date("2000-01-01T12:00:00")).unwrap(),
            2_451_545.0
        );
        assert_eq!(proleptic.reference().to_string(), "-4713-11-24T12:00:00");
    }

    #[test]
    fn fractions_and_units() {
        assert_eq!(
            decoded("days since 2000-01-01", "standard", 0.5),
            "2000-01-01T12:00:00"
        );
        // 0.1 day is 8640 s = 02:24:00; the binary fraction rounds to it.
        assert_eq!(
            decoded("days since 2000-01-01", "standard", 0.1),
            "2000-01-01T02:24:00"
        );
        assert_eq!(
            decoded("hours since 2000-01-01", "standard", 1.5),
            "2000-01-01T01:30:00"
        );
        assert_eq!(
            decoded("minutes since 2000-01-01 00:00", "standard", 90.0),
            "2000-01-01T01:30:00"
        );
        assert_eq!(
            decoded("seconds since 2000-01-01", "standard", 0.25),
            "2000-01-01T00:00:00.25"
        );
        assert_eq!(
            decoded("milliseconds since 2000-01-01", "standard", 1500.0),
            "2000-01-01T00:00:01.5"
        );
        assert_eq!(
            decoded("h since 2000-01-01", "standard", 6.0),
            "2000-01-01T06:00:00"
        );
        assert_eq!(
            decoded("Hours since 2000-01-01", "standard", -6.0),
            "1999-12-31T18:00:00"
        );
        assert_eq!(
            decoded("d since 2000-03-01", "standard", -1.0),
            "2000-02-29T00:00:00"
        );
        assert_eq!(
            decoded("d since 2000-03-01", "noleap", -1.0),
            "2000-02-28T00:00:00"
        );
    }

    #[test]
    fn encode_inverts_decode() {
        for calendar in [
            "standard",
            "proleptic_gregorian",
            "julian",
            "noleap",
            "all_leap",
            "360_day",
        ] {
            let u = units("hours since 1850-01-01 00:00:00", calendar);
            for value in [
                -1e7,
                -87_654.5,
                -1.0,
                0.0,
                0.25,
                1.0,
                23.0,
                8_760.0,
                1_000_000.0,
                1.5e6,
                4e7,
            ] {
                let d = u.decode(value).unwrap();
                assert_eq!(d.calendar(), u.calendar());
                let back = u.encode(&d).unwrap();
                assert!(
                    (back - value).abs() < 1e-6,
                    "{calendar} {value} -> {d} -> {back}"
                );
            }
        }
    }

    #[test]
    fn parse_and_display_dates() {
        assert_eq!(date("2026-10-14 06:00").to_string(), "2026-10-14T06:00:00");
        assert_eq!(date("2026-10-14").to_string(), "2026-10-14T00:00:00");
        assert_eq!(
            date("2026-10-14T06:00:30").to_string(),
            "2026-10-14T06:00:30"
        );
        assert_eq!(date("2026-10-14T06:00:30Z"), date("2026-10-14 06:00:30"));
        assert_eq!(date(" 2026-1-4 6:5 ").to_string(), "2026-01-04T06:05:00");
        assert_eq!(date("0001-01-01").to_string(), "0001-01-01T00:00:00");
        let d = date("2026-10-14 06:07:08.5");
        assert_eq!(
            (
                d.year(),
                d.month(),
                d.day(),
                d.hour(),
                d.minute(),
                d.second()
            ),
            (2026, 10, 14, 6, 7, 8.5)
        );
        assert_eq!(d.calendar(), Calendar::Standard);
        let parsed: DateTime = "2026-10-14 06:00".parse().unwrap();
        assert_eq!(parsed, date("2026-10-14T06:00:00"));
    }

    #[test]
    fn dates_order_by_their_labels() {
        assert!(date("2026-10-14 06:00") < date("2026-10-14 12:00"));
        assert!(date("2026-10-14 23:59:59.5") < date("2026-10-15"));
        assert!(date("1999-12-31") < date("2000-01-01"));
        assert!(date("-0001-01-01") < date("0000-01-01"));
        let noleap = DateTime::parse_in("2026-10-14 06:00", Calendar::NoLeap).unwrap();
        assert_eq!(noleap, date("2026-10-14 06:00"));
        assert!(noleap > date("2026-10-14 05:59"));
    }

    #[test]
    fn date_errors_say_where_and_what() {
        match DateTime::parse("2026/10/14") {
            Err(CalendarError::Date { span, expected, .. }) => {
                assert_eq!(span, 4..5);
                assert!(expected.contains("'-'"), "{expected}");
            }
            other => panic!("{other:?}"),
        }
        match DateTime::parse("2026-10-14 06:00 tomorrow") {
            Err(CalendarError::Date { span, .. }) => assert_eq!(span, 17..18),
            other => panic!("{other:?}"),
        }
        assert!(matches!(
            DateTime::parse("2026-13-01"),
            Err(CalendarError::InvalidDate { .. })
        ));
        assert!(matches!(
            DateTime::parse("2026-10-14 24:00"),
            Err(CalendarError::InvalidDate { .. })
        ));
        assert!(matches!(
            DateTime::parse("2026-10-14 06:60"),
            Err(CalendarError::InvalidDate { .. })
        ));
        assert!(matches!(
            DateTime::parse("2026-10-14 06:00:60"),
            Err(CalendarError::InvalidDate { .. })
        ));
        assert!(matches!(
            DateTime::parse(""),
            Err(CalendarError::Date { .. })
        ));
        assert!(matches!(
            DateTime::parse("2026-10-14T"),
            Err(CalendarError::Date { .. })
        ));
        assert!(matches!(
            DateTime::parse("2026-10-14 +25:00"),
            Err(CalendarError::Date { .. })
        ));
        let message = DateTime::parse("2001-02-29").unwrap_err().to_string();
        assert!(
            message.contains("2001-02-29") && message.contains("standard"),
            "{message}"
        );
    }

    #[test]
    fn time_unit_errors() {
        match CfTimeUnits::parse("months since 2000-01-01", "360_day") {
            Err(CalendarError::TimeUnits { span, expected, .. }) => {
                assert_eq!(span, 0..6);
                assert!(expected.contains("months and years vary"), "{expected}");
            }
            other => panic!("{other:?}"),
        }
        match CfTimeUnits::parse("hours", "standard") {
            Err(CalendarError::TimeUnits { found, .. }) => assert_eq!(found, "no reference date"),
            other => panic!("{other:?}"),
        }
        match CfTimeUnits::parse("hours after 2000-01-01", "standard") {
            Err(CalendarError::TimeUnits { span, .. }) => assert_eq!(span, 6..11),
            other => panic!("{other:?}"),
        }
        match CfTimeUnits::parse("fortnights since 2000-01-01", "standard") {
            Err(CalendarError::TimeUnits { span, .. }) => assert_eq!(span, 0..10),
            other => panic!("{other:?}"),
        }
        // A date error points into the units string.
        match CfTimeUnits::parse("hours since 2000-01-x", "standard") {
            Err(CalendarError::Date { text, span, .. }) => {
                assert_eq!(text, "hours since 2000-01-x");
                assert_eq!(span, 20..21);
            }
            other => panic!("{other:?}"),
        }
        assert!(matches!(
            CfTimeUnits::parse("", "standard"),
            Err(CalendarError::TimeUnits { .. })
        ));
        assert!(matches!(
            CfTimeUnits::parse("days since 2000-01-01", "lunar"),
            Err(CalendarError::UnknownCalendar { .. })
        ));
        assert!(matches!(
            Calendar::parse("none"),
            Err(CalendarError::UnknownCalendar { .. })
        ));
    }

    #[test]
    fn decode_refuses_missing_and_absurd_values() {
        let u = units("hours since 1900-01-01", "standard");
        assert!(matches!(
            u.decode(f64::NAN),
            Err(CalendarError::NonFinite { .. })
        ));
        assert!(matches!(
            u.decode(f64::INFINITY),
            Err(CalendarError::NonFinite { .. })
        ));
        assert!(matches!(
            u.decode(1e300),
            Err(CalendarError::OutOfRange { .. })
        ));
        assert!(u.decode(-1e12).is_ok());
    }

    #[test]
    fn calendar_names() {
        assert_eq!(Calendar::parse("").unwrap(), Calendar::Standard);
        assert_eq!(Calendar::parse("Gregorian").unwrap(), Calendar::Standard);
        assert_eq!(
            Calendar::parse("PROLEPTIC_GREGORIAN").unwrap(),
            Calendar::ProlepticGregorian
        );
        for calendar in [
            Calendar::Standard,
            Calendar::ProlepticGregorian,
            Calendar::Julian,
            Calendar::NoLeap,
            Calendar::AllLeap,
            Calendar::Day360,
        ] {
            assert_eq!(Calendar::parse(calendar.name()).unwrap(), calendar);
        }
    }

    #[test]
    fn units_display_in_cf_form() {
        let u = units("hours since 1900-01-01 00:00:0.0", "gregorian");
        assert_eq!(u.to_string(), "hours since 1900-01-01 00:00:00");
        let again = units(&u.to_string(), u.calendar().name());
        assert_eq!(again, u);
        let made = CfTimeUnits::new(TimeUnit::Day, date("2000-01-01"), Calendar::NoLeap).unwrap();
        assert_eq!(
            made.decode(365.0).unwrap().to_string(),
            "2001-01-01T00:00:00"
        );
    }

    #[test]
    fn add_seconds_and_intervals() {
        let start = date("2026-10-14 06:00");
        assert_eq!(
            start.add_seconds(18.0 * 3600.0).unwrap().to_string(),
            "2026-10-15T00:00:00"
        );
        assert_eq!(
            date("2026-10-15").seconds_since(&start).unwrap(),
            18.0 * 3600.0
        );
        assert!(start.add_seconds(f64::NAN).is_err());
    }
}

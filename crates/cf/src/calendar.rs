//! CF time decoding: `"<unit> since <reference date>"` in the CF calendars, written with
//! plain day-number arithmetic (no date library).
//!
//! # Design
//!
//! Every calendar maps a date `(year, month, day)` to a *day number* and back:
//!
//! - [`Calendar::ProlepticGregorian`] and [`Calendar::Julian`] use the Julian Day Number
//!   (JDN; Fliegel–Van Flandern / Richards formulas with floor division, so they hold for
//!   negative years too);
//! - [`Calendar::Standard`] (CF `standard` / `gregorian`) is the mixed calendar: Julian up to
//!   1582-10-04, Gregorian from 1582-10-15 (JDN 2 299 161), which follows it directly; dates in
//!   the gap 1582-10-05..14 do not exist;
//! - [`Calendar::NoLeap`], [`Calendar::AllLeap`] and [`Calendar::Day360`] count
//!   `365 y`, `366 y` or `360 y` days plus the day of the year.
//!
//! A time value is then `reference + value × unit`: the value is split into its integer and
//! fractional parts so that the sum is formed exactly in integer microseconds, and the result
//! is turned back into a date and a time of day. Years are numbered astronomically (year 0
//! exists and is a leap year in the calendars that have leap years); reference offsets
//! (`+06:00`, `-5`, `UTC`, `Z`) are applied so that results are always UTC.
//!
//! Output is ISO 8601, `YYYY-MM-DDTHH:MM:SSZ`, with fractional seconds only when they are
//! not zero (microsecond resolution, trailing zeros dropped).

use std::fmt;

use crate::CfError;

/// A CF calendar (the `calendar` attribute of a time coordinate).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Default)]
pub enum Calendar {
    /// CF `standard` / `gregorian`: Julian before 1582-10-15, Gregorian from then on. The
    /// default when a time coordinate has no `calendar` attribute.
    #[default]
    Standard,
    /// CF `proleptic_gregorian`: Gregorian rules for every year.
    ProlepticGregorian,
    /// CF `julian`: a leap year every four years.
    Julian,
    /// CF `noleap` / `365_day`: no leap years.
    NoLeap,
    /// CF `all_leap` / `366_day`: every year is a leap year.
    AllLeap,
    /// CF `360_day`: twelve months of 30 days.
    Day360,
}

impl Calendar {
    /// Every calendar, in declaration order.
    pub const ALL: [Calendar; 6] = [
        Calendar::Standard,
        Calendar::ProlepticGregorian,
        Calendar::Julian,
        Calendar::NoLeap,
        Calendar::AllLeap,
        Calendar::Day360,
    ];

    /// The canonical CF name (`standard`, `proleptic_gregorian`, `julian`, `noleap`,
    /// `all_leap`, `360_day`).
    pub fn cf_name(&self) -> &'static str {
        match self {
            Calendar::Standard => "standard",
            Calendar::ProlepticGregorian => "proleptic_gregorian",
            Calendar::Julian => "julian",
            Calendar::NoLeap => "noleap",
            Calendar::AllLeap => "all_leap",
            Calendar::Day360 => "360_day",
        }
    }

    /// Parses a CF calendar name, case-insensitively, including the aliases `gregorian`,
    /// `365_day` and `366_day`. `None` for an unknown name (for example `none`).
    pub fn from_cf_name(name: &str) -> Option<Calendar> {
        match name.trim().to_ascii_lowercase().as_str() {
            "standard" | "gregorian" => Some(Calendar::Standard),
            "proleptic_gregorian" => Some(Calendar::ProlepticGregorian),
            "julian" => Some(Calendar::Julian),
            "noleap" | "no_leap" | "365_day" => Some(Calendar::NoLeap),
            "all_leap" | "366_day" => Some(Calendar::AllLeap),
            "360_day" => Some(Calendar::Day360),
            _ => None,
        }
    }

    /// The calendar names accepted by [`Calendar::from_cf_name`], for error messages.
    pub const ACCEPTED: &'static str = "standard, gregorian, proleptic_gregorian, julian, \
                                        noleap, 365_day, all_leap, 366_day, 360_day";
}

impl fmt::Display for Calendar {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.cf_name())
    }
}

/// Parses the `calendar` attribute: `None` (no attribute) is [`Calendar::Standard`] as CF
/// prescribes; an unknown name is [`CfError::UnknownCalendar`].
pub fn parse_calendar(attr: Option<&str>) -> Result<Calendar, CfError> {
    match attr {
        None => Ok(Calendar::Standard),
        Some(name) => Calendar::from_cf_name(name).ok_or_else(|| CfError::UnknownCalendar {
            file: None,
            variable: None,
            calendar: name.to_string(),
        }),
    }
}

/// Microseconds per day.
const US_PER_DAY: i64 = 86_400_000_000;

/// JDN of Gregorian 1582-10-15, the first day of the Gregorian part of the standard calendar.
const GREGORIAN_START_JDN: i64 = 2_299_161;

/// Whether `year` is a leap year in `calendar`. In the standard calendar 1582 is not.
pub fn is_leap(calendar: Calendar, year: i64) -> bool {
    let julian = year.rem_euclid(4) == 0;
    let gregorian = julian && (year.rem_euclid(100) != 0 || year.rem_euclid(400) == 0);
    match calendar {
        Calendar::ProlepticGregorian => gregorian,
        Calendar::Julian => julian,
        Calendar::Standard => {
            if year < 1582 {
                julian
            } else {
                gregorian
            }
        }
        Calendar::NoLeap | Calendar::Day360 => false,
        Calendar::AllLeap => true,
    }
}

/// Number of days in `month` (1–12) of `year`; `None` for a month outside 1–12. Standard
/// 1582-10 has 21 days (the ten days of the switch are missing).
pub fn days_in_month(calendar: Calendar, year: i64, month: u32) -> Option<u32> {
    const LEN: [u32; 12] = [31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31];
    if !(1..=12).contains(&month) {
        return None;
    }
    if calendar == Calendar::Day360 {
        return Some(30);
    }
    if calendar == Calendar::Standard && year == 1582 && month == 10 {
        return Some(21);
    }
    let base = LEN[month as usize - 1];
    Some(if month == 2 && is_leap(calendar, year) { 29 } else { base })
}

/// Number of days in `year`.
pub fn days_in_year(calendar: Calendar, year: i64) -> i64 {
    (1..=12).map(|m| i64::from(days_in_month(calendar, year, m).unwrap_or(0))).sum()
}

/// Cumulative days before each month in a 365-day and a 366-day year.
const CUM_365: [i64; 13] = [0, 31, 59, 90, 120, 151, 181, 212, 243, 273, 304, 334, 365];
const CUM_366: [i64; 13] = [0, 31, 60, 91, 121, 152, 182, 213, 244, 274, 305, 335, 366];

fn jdn_gregorian(y: i64, m: i64, d: i64) -> i64 {
    let a = (14 - m).div_euclid(12);
    let y2 = y + 4800 - a;
    let m2 = m + 12 * a - 3;
    d + (153 * m2 + 2).div_euclid(5) + 365 * y2 + y2.div_euclid(4) - y2.div_euclid(100)
        + y2.div_euclid(400)
        - 32045
}

fn jdn_julian(y: i64, m: i64, d: i64) -> i64 {
    let a = (14 - m).div_euclid(12);
    let y2 = y + 4800 - a;
    let m2 = m + 12 * a - 3;
    d + (153 * m2 + 2).div_euclid(5) + 365 * y2 + y2.div_euclid(4) - 32083
}

fn from_jdn_gregorian(j: i64) -> (i64, u32, u32) {
    let a = j + 32044;
    let b = (4 * a + 3).div_euclid(146_097);
    let c = a - (146_097 * b).div_euclid(4);
    tail_from_jdn(c, 100 * b)
}

fn from_jdn_julian(j: i64) -> (i64, u32, u32) {
    tail_from_jdn(j + 32082, 0)
}

fn tail_from_jdn(c: i64, century_years: i64) -> (i64, u32, u32) {
    let d = (4 * c + 3).div_euclid(1461);
    let e = c - (1461 * d).div_euclid(4);
    let m = (5 * e + 2).div_euclid(153);
    let day = e - (153 * m + 2).div_euclid(5) + 1;
    let month = m + 3 - 12 * m.div_euclid(10);
    let year = century_years + d - 4800 + m.div_euclid(10);
    (year, month as u32, day as u32)
}

/// The day number of a date in `calendar` (JDN for the Gregorian, Julian and standard
/// calendars; `365 y + day of year` and so on for the others). `None` when the date does not
/// exist in the calendar (month 13, 30 February outside `360_day`, 1582-10-10 in the standard
/// calendar...).
pub fn day_number(calendar: Calendar, year: i64, month: u32, day: u32) -> Option<i64> {
    let len = days_in_month(calendar, year, month)?;
    if calendar == Calendar::Standard && year == 1582 && month == 10 {
        // 1..4 then 15..31: 21 days, but numbered as in the calendar.
        if day == 0 || (5..=14).contains(&day) || day > 31 {
            return None;
        }
    } else if day == 0 || day > len {
        return None;
    }
    let (y, m, d) = (year, i64::from(month), i64::from(day));
    Some(match calendar {
        Calendar::ProlepticGregorian => jdn_gregorian(y, m, d),
        Calendar::Julian => jdn_julian(y, m, d),
        Calendar::Standard => {
            if (year, month, day) >= (1582, 10, 15) {
                jdn_gregorian(y, m, d)
            } else {
                jdn_julian(y, m, d)
            }
        }
        Calendar::NoLeap => 365 * y + CUM_365[month as usize - 1] + d - 1,
        Calendar::AllLeap => 366 * y + CUM_366[month as usize - 1] + d - 1,
        Calendar::Day360 => 360 * y + 30 * (m - 1) + d - 1,
    })
}

/// The date `(year, month, day)` of a day number (inverse of [`day_number`]).
pub fn date_of_day_number(calendar: Calendar, n: i64) -> (i64, u32, u32) {
    let by_table = |len: i64, cum: &[i64; 13]| {
        let year = n.div_euclid(len);
        let doy = n.rem_euclid(len);
        let month = (1..=12).find(|&m| doy < cum[m]).unwrap_or(12);
        (year, month as u32, (doy - cum[month - 1] + 1) as u32)
    };
    match calendar {
        Calendar::ProlepticGregorian => from_jdn_gregorian(n),
        Calendar::Julian => from_jdn_julian(n),
        Calendar::Standard => {
            if n >= GREGORIAN_START_JDN {
                from_jdn_gregorian(n)
            } else {
                from_jdn_julian(n)
            }
        }
        Calendar::NoLeap => by_table(365, &CUM_365),
        Calendar::AllLeap => by_table(366, &CUM_366),
        Calendar::Day360 => {
            let year = n.div_euclid(360);
            let doy = n.rem_euclid(360);
            (year, (doy / 30 + 1) as u32, (doy % 30 + 1) as u32)
        }
    }
}

/// A calendar date and time of day (UTC), microsecond resolution.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub struct DateTime {
    /// Astronomical year (year 0 exists).
    pub year: i64,
    /// Month, 1–12.
    pub month: u32,
    /// Day of the month, 1–31.
    pub day: u32,
    /// Hour, 0–23.
    pub hour: u32,
    /// Minute, 0–59.
    pub minute: u32,
    /// Second, 0–59.
    pub second: u32,
    /// Microseconds, 0–999 999.
    pub micros: u32,
}

impl DateTime {
    /// ISO 8601 `YYYY-MM-DDTHH:MM:SSZ`, with fractional seconds only when nonzero.
    pub fn to_iso(&self) -> String {
        self.to_string()
    }

    /// Microseconds since midnight.
    fn micros_of_day(&self) -> i64 {
        ((i64::from(self.hour) * 60 + i64::from(self.minute)) * 60 + i64::from(self.second))
            * 1_000_000
            + i64::from(self.micros)
    }

    fn from_day_and_micros(calendar: Calendar, day: i64, us: i64) -> DateTime {
        let (year, month, d) = date_of_day_number(calendar, day);
        let secs = us / 1_000_000;
        DateTime {
            year,
            month,
            day: d,
            hour: (secs / 3600) as u32,
            minute: (secs / 60 % 60) as u32,
            second: (secs % 60) as u32,
            micros: (us % 1_000_000) as u32,
        }
    }
}

impl fmt::Display for DateTime {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        if self.year < 0 {
            write!(f, "-{:04}", -self.year)?;
        } else {
            write!(f, "{:04}", self.year)?;
        }
        write!(
            f,
            "-{:02}-{:02}T{:02}:{:02}:{:02}",
            self.month, self.day, self.hour, self.minute, self.second
        )?;
        if self.micros != 0 {
            let frac = format!("{:06}", self.micros);
            write!(f, ".{}", frac.trim_end_matches('0'))?;
        }
        f.write_str("Z")
    }
}

/// The unit of a CF time coordinate.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum TimeUnit {
    /// Seconds.
    Seconds,
    /// Minutes.
    Minutes,
    /// Hours.
    Hours,
    /// Days (86 400 s).
    Days,
}

impl TimeUnit {
    /// Length of the unit in microseconds.
    pub fn micros(&self) -> i64 {
        match self {
            TimeUnit::Seconds => 1_000_000,
            TimeUnit::Minutes => 60_000_000,
            TimeUnit::Hours => 3_600_000_000,
            TimeUnit::Days => US_PER_DAY,
        }
    }
}

/// A parsed `"<unit> since <reference>"` string.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct TimeUnits {
    /// The units string as given.
    pub text: String,
    /// The unit.
    pub unit: TimeUnit,
    /// Reference date and time as written (local to `offset_minutes`).
    pub reference: DateTime,
    /// UTC offset of the reference, minutes (east positive).
    pub offset_minutes: i64,
}

fn units_error(units: &str, reason: impl Into<String>) -> CfError {
    CfError::TimeUnits {
        file: None,
        variable: None,
        units: units.to_string(),
        reason: reason.into(),
    }
}

/// Parses CF time units: `seconds|minutes|hours|days since YYYY-MM-DD[( |T)hh[:mm[:ss[.f]]]]
/// [Z|UTC|GMT|±hh[:mm]|±hhmm]`. Common abbreviations are accepted (`s`, `sec`, `secs`,
/// `min`, `mins`, `h`, `hr`, `hrs`, `d`, and the singular forms). Months and years are
/// refused: CF discourages them because their length is not fixed.
///
/// The reference date is only checked for shape here; whether it exists depends on the
/// calendar and is checked by [`decode_with`].
pub fn parse_units(units: &str) -> Result<TimeUnits, CfError> {
    let text = units.trim();
    let lower = text.to_ascii_lowercase();
    let Some(pos) = lower.find(" since ") else {
        return Err(units_error(units, "expected \"<unit> since <date>\""));
    };
    let unit_word = lower[..pos].trim();
    let unit = match unit_word {
        "s" | "sec" | "secs" | "second" | "seconds" => TimeUnit::Seconds,
        "min" | "mins" | "minute" | "minutes" => TimeUnit::Minutes,
        "h" | "hr" | "hrs" | "hour" | "hours" => TimeUnit::Hours,
        "d" | "day" | "days" => TimeUnit::Days,
        other => {
            return Err(units_error(
                units,
                format!(
                    "unit {other:?} is not supported; use seconds, minutes, hours or days \
                     (months and years have no fixed length)"
                ),
            ));
        }
    };
    let (reference, offset_minutes) =
        parse_datetime(lower[pos + 7..].trim()).map_err(|reason| units_error(units, reason))?;
    Ok(TimeUnits { text: units.to_string(), unit, reference, offset_minutes })
}

fn number<T: std::str::FromStr>(s: &str, what: &str) -> Result<T, String> {
    if s.is_empty() || !s.bytes().all(|b| b.is_ascii_digit()) {
        return Err(format!("{what} {s:?} is not a number"));
    }
    s.parse().map_err(|_| format!("{what} {s:?} is out of range"))
}

/// Parses a date, optional time and optional zone. Returns the date-time as written and the
/// zone offset in minutes. Accepts `T` or spaces between date and time.
fn parse_datetime(text: &str) -> Result<(DateTime, i64), String> {
    let text = text.trim();
    // Date part: up to the first space or 'T' after the year's own sign.
    let (neg, body) = match text.strip_prefix('-') {
        Some(rest) => (true, rest),
        None => (false, text.strip_prefix('+').unwrap_or(text)),
    };
    let split = body.find(['t', 'T', ' ']).unwrap_or(body.len());
    let (date, rest) = body.split_at(split);
    let parts: Vec<&str> = date.split('-').collect();
    if parts.len() != 3 {
        return Err(format!("date {date:?} is not YYYY-MM-DD"));
    }
    let mut year: i64 = number(parts[0], "year")?;
    if neg {
        year = -year;
    }
    // Far beyond any model or proxy record, and far inside the range where the day-number
    // arithmetic (i64 days, i128 microseconds) is exact.
    if year.abs() > MAX_YEAR {
        return Err(format!("year {year} is out of range (±{MAX_YEAR})"));
    }
    let month: u32 = number(parts[1], "month")?;
    let day: u32 = number(parts[2], "day")?;
    if !(1..=12).contains(&month) || !(1..=31).contains(&day) {
        return Err(format!("date {date:?} has month or day out of range"));
    }
    let rest = rest.trim_start_matches(['t', 'T', ' ']).trim();
    // Time part: digits, ':' and '.', then the zone.
    let tend =
        rest.find(|c: char| !(c.is_ascii_digit() || c == ':' || c == '.')).unwrap_or(rest.len());
    let (time, zone) = rest.split_at(tend);
    let (mut hour, mut minute, mut second, mut micros) = (0u32, 0u32, 0u32, 0u32);
    if !time.is_empty() {
        let tp: Vec<&str> = time.split(':').collect();
        if tp.len() > 3 {
            return Err(format!("time {time:?} is not hh:mm:ss"));
        }
        hour = number(tp[0], "hour")?;
        if let Some(m) = tp.get(1) {
            minute = number(m, "minute")?;
        }
        if let Some(s) = tp.get(2) {
            let (whole, frac) = s.split_once('.').unwrap_or((s, ""));
            second = number(whole, "second")?;
            if !frac.is_empty() {
                if !frac.bytes().all(|b| b.is_ascii_digit()) {
                    return Err(format!("fractional seconds {frac:?} are not a number"));
                }
                let mut digits: String = frac.chars().take(6).collect();
                while digits.len() < 6 {
                    digits.push('0');
                }
                micros = number(&digits, "fraction")?;
            }
        }
        if hour > 24 || minute > 59 || second > 60 {
            return Err(format!("time {time:?} is out of range"));
        }
    }
    let offset = parse_zone(zone.trim())?;
    let mut dt = DateTime { year, month, day, hour, minute, second, micros };
    // 24:00:00 and leap second 60 are folded into the arithmetic by the caller.
    if hour == 24 && (minute, second, micros) != (0, 0, 0) {
        return Err(format!("time {time:?} is out of range"));
    }
    if second == 60 {
        dt.second = 59;
        dt.micros = 999_999;
    }
    Ok((dt, offset))
}

fn parse_zone(zone: &str) -> Result<i64, String> {
    let z = zone.to_ascii_lowercase();
    let z = z.trim();
    if z.is_empty() || z == "z" || z == "utc" || z == "gmt" || z == "+00:00" || z == "-00:00" {
        return Ok(0);
    }
    let z = z.strip_prefix("utc").unwrap_or(z).trim();
    let (sign, body) = match z.as_bytes().first() {
        Some(b'+') => (1, &z[1..]),
        Some(b'-') => (-1, &z[1..]),
        _ => return Err(format!("time zone {zone:?} is not Z, UTC or ±hh:mm")),
    };
    let (h, m) = if let Some((h, m)) = body.split_once(':') {
        (number::<i64>(h, "zone hour")?, number::<i64>(m, "zone minute")?)
    } else if body.len() == 4 && body.is_ascii() {
        (number::<i64>(&body[..2], "zone hour")?, number::<i64>(&body[2..], "zone minute")?)
    } else {
        (number::<i64>(body, "zone hour")?, 0)
    };
    if h > 14 || m > 59 {
        return Err(format!("time zone {zone:?} is out of range"));
    }
    Ok(sign * (h * 60 + m))
}

/// Decodes one value with parsed units into a UTC date-time.
pub fn decode_with(value: f64, units: &TimeUnits, calendar: Calendar) -> Result<DateTime, CfError> {
    if !value.is_finite() {
        return Err(CfError::TimeValue {
            file: None,
            variable: None,
            value,
            reason: "the time value is not a finite number (missing?)".into(),
        });
    }
    let r = units.reference;
    let ref_day =
        day_number(calendar, r.year, r.month, r.day).ok_or_else(|| CfError::TimeUnits {
            file: None,
            variable: None,
            units: units.text.clone(),
            reason: format!("the reference date does not exist in the {calendar} calendar"),
        })?;
    let whole = value.trunc();
    let frac = value - whole;
    let limit = 1e15 / (units.unit.micros() as f64 / 1e6);
    if whole.abs() > limit {
        return Err(CfError::TimeValue {
            file: None,
            variable: None,
            value,
            reason: "the time value is too large to be a date".into(),
        });
    }
    let unit_us = i128::from(units.unit.micros());
    let total: i128 = i128::from(ref_day) * i128::from(US_PER_DAY) + i128::from(r.micros_of_day())
        - i128::from(units.offset_minutes) * 60_000_000
        + (whole as i128) * unit_us
        + (frac * unit_us as f64).round() as i128;
    let day = total.div_euclid(i128::from(US_PER_DAY)) as i64;
    let us = total.rem_euclid(i128::from(US_PER_DAY)) as i64;
    Ok(DateTime::from_day_and_micros(calendar, day, us))
}

/// Decodes one time value: `units` is the CF `"<unit> since <date>"` string, the result an
/// ISO 8601 UTC string (`YYYY-MM-DDTHH:MM:SSZ`, fractional seconds only when nonzero).
pub fn decode(value: f64, units: &str, calendar: Calendar) -> Result<String, CfError> {
    let parsed = parse_units(units)?;
    decode_with(value, &parsed, calendar).map(|d| d.to_iso())
}

/// A sortable instant: microseconds since day number 0 of the calendar (comparable only
/// within one calendar).
pub fn instant(dt: &DateTime, calendar: Calendar) -> Option<i128> {
    let day = day_number(calendar, dt.year, dt.month, dt.day)?;
    Some(i128::from(day) * i128::from(US_PER_DAY) + i128::from(dt.micros_of_day()))
}

/// The proleptic Gregorian date and time `secs` seconds after 1970-01-01T00:00:00Z (for
/// stamping outputs with the current time).
pub fn from_unix_seconds(secs: i64) -> DateTime {
    let cal = Calendar::ProlepticGregorian;
    let epoch = day_number(cal, 1970, 1, 1).unwrap_or(0);
    DateTime::from_day_and_micros(
        cal,
        epoch + secs.div_euclid(86_400),
        secs.rem_euclid(86_400) * 1_000_000,
    )
}

/// The largest year (either sign) a date may have.
pub const MAX_YEAR: i64 = 100_000_000;

/// Parses an ISO 8601 instant as written by a user (`2026-01-15T06:00:00Z`, `…T06:00Z`,
/// `…T06:00:00`, `2026-01-15T06`, `2026-01-15`, with a space instead of `T` too). A zone
/// other than UTC is shifted to UTC with proleptic Gregorian arithmetic. The day is only
/// checked against 1–31: whether it exists depends on the file's calendar.
pub fn parse_iso(text: &str) -> Result<DateTime, String> {
    let (dt, offset) = parse_datetime(text)?;
    if offset == 0 && dt.hour < 24 {
        return Ok(dt);
    }
    let cal = Calendar::ProlepticGregorian;
    let day = day_number(cal, dt.year, dt.month, dt.day)
        .ok_or_else(|| format!("{text:?} is not a date"))?;
    let total = i128::from(day) * i128::from(US_PER_DAY) + i128::from(dt.micros_of_day())
        - i128::from(offset) * 60_000_000;
    Ok(DateTime::from_day_and_micros(
        cal,
        total.div_euclid(i128::from(US_PER_DAY)) as i64,
        total.rem_euclid(i128::from(US_PER_DAY)) as i64,
    ))
}

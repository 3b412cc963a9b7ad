//! Calendar arithmetic, checked against the calendars' own rules and published reference
//! values.
//!
//! Sources: the CF Conventions 1.11, §4.4.1 "Calendar" (the definitions of the calendars and
//! the 1582-10-04 → 1582-10-15 switch of `standard`); Meeus, *Astronomical Algorithms*
//! (2nd ed.), ch. 7 (Julian Day Numbers: J2000.0 = JD 2451545.0, the Gregorian reform at JD
//! 2299160.5); Python's cftime for four decoded values (quoted in the project's notes on the
//! netCDF stack).

mod common;

use common::*;
use shearbox_cf::calendar::{self, date_of_day_number, day_number, days_in_month, decode};
use shearbox_cf::{Calendar, CfError, Dataset, TimeSelector, VarOverrides};

#[test]
fn cftime_reference_values() -> TestResult {
    // cftime.num2date(1_000_000, "hours since 1900-01-01", calendar).
    let units = "hours since 1900-01-01";
    for (cal, want) in [
        (Calendar::Standard, "2014-01-29T16:00:00Z"),
        (Calendar::ProlepticGregorian, "2014-01-29T16:00:00Z"),
        (Calendar::NoLeap, "2014-02-26T16:00:00Z"),
        (Calendar::Day360, "2015-09-27T16:00:00Z"),
        (Calendar::AllLeap, "2013-11-04T16:00:00Z"),
    ] {
        let got = decode(1_000_000.0, units, cal)?;
        ensure!(got == want, "{cal}: {got}, want {want}");
    }
    // Julian, derived from the leap rule: 1 000 000 h = 41 666 d 16 h. Between 1900-01-01
    // and 2014-01-29 the Julian calendar has one leap day more than the Gregorian (1900-02-29),
    // so the same count of days ends one day earlier.
    let got = decode(1_000_000.0, units, Calendar::Julian)?;
    ensure!(got == "2014-01-28T16:00:00Z", "julian: {got}");
    Ok(())
}

#[test]
fn julian_day_numbers() -> TestResult {
    // Meeus ch. 7: J2000.0 (2000-01-01 12h) is JD 2451545.0; the Gregorian reform took
    // Julian 1582-10-04 (JD 2299159.5 at 0h, so JDN 2299160) to Gregorian 1582-10-15;
    // JD 0 is Julian −4712-01-01 (4713 BC) = proleptic Gregorian −4713-11-24; the Unix epoch
    // 1970-01-01 is JD 2440587.5 (JDN 2440588).
    let checks = [
        (Calendar::ProlepticGregorian, 2000, 1, 1, 2_451_545),
        (Calendar::ProlepticGregorian, 1970, 1, 1, 2_440_588),
        (Calendar::ProlepticGregorian, 1582, 10, 15, 2_299_161),
        (Calendar::Julian, 1582, 10, 4, 2_299_160),
        (Calendar::Julian, -4712, 1, 1, 0),
        (Calendar::ProlepticGregorian, -4713, 11, 24, 0),
        (Calendar::Standard, 1582, 10, 4, 2_299_160),
        (Calendar::Standard, 1582, 10, 15, 2_299_161),
        (Calendar::Standard, 2000, 1, 1, 2_451_545),
    ];
    for (cal, y, m, d, jdn) in checks {
        ensure!(
            day_number(cal, y, m, d) == Some(jdn),
            "{cal} {y}-{m}-{d}: {:?}",
            day_number(cal, y, m, d)
        );
    }
    Ok(())
}

#[test]
fn the_1582_switch_of_the_standard_calendar() -> TestResult {
    // CF §4.4.1: in `standard`, 1582-10-04 (Julian) is followed by 1582-10-15 (Gregorian).
    ensure!(
        decode(1.0, "days since 1582-10-04", Calendar::Standard)? == "1582-10-15T00:00:00Z",
        "switch"
    );
    ensure!(
        decode(-1.0, "days since 1582-10-15", Calendar::Standard)? == "1582-10-04T00:00:00Z",
        "back"
    );
    ensure!(
        decode(1.0, "days since 1582-10-04", Calendar::ProlepticGregorian)?
            == "1582-10-05T00:00:00Z",
        "no switch"
    );
    ensure!(
        decode(1.0, "days since 1582-10-04", Calendar::Julian)? == "1582-10-05T00:00:00Z",
        "no switch"
    );
    for d in 5..=14 {
        ensure!(
            day_number(Calendar::Standard, 1582, 10, d).is_none(),
            "1582-10-{d} does not exist"
        );
    }
    let err = decode(0.0, "days since 1582-10-10", Calendar::Standard);
    ensure!(matches!(err, Err(CfError::TimeUnits { .. })), "{err:?}");
    ensure!(days_in_month(Calendar::Standard, 1582, 10) == Some(21), "October 1582 has 21 days");
    Ok(())
}

/// Leap years by the rule of each calendar (CF §4.4.1), written independently of the crate.
fn leap_by_rule(cal: Calendar, y: i64) -> bool {
    let julian = y % 4 == 0;
    let gregorian = (y % 4 == 0 && y % 100 != 0) || y % 400 == 0;
    match cal {
        Calendar::ProlepticGregorian => gregorian,
        Calendar::Julian => julian,
        Calendar::Standard => {
            if y < 1582 {
                julian
            } else {
                gregorian
            }
        }
        Calendar::NoLeap | Calendar::Day360 => false,
        Calendar::AllLeap => true,
    }
}

#[test]
fn day_counts_per_year_and_month() -> TestResult {
    let month_len = [31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31];
    for cal in Calendar::ALL {
        for y in 1..2500i64 {
            let len = day_number(cal, y + 1, 1, 1).ok_or("date")?
                - day_number(cal, y, 1, 1).ok_or("date")?;
            let want = match cal {
                Calendar::Day360 => 360,
                Calendar::Standard if y == 1582 => 355, // ten days dropped
                _ => {
                    if leap_by_rule(cal, y) {
                        366
                    } else {
                        365
                    }
                }
            };
            ensure!(len == want, "{cal} {y}: {len} days, want {want}");
            if y == 1582 && cal == Calendar::Standard {
                continue;
            }
            for m in 1..=12u32 {
                let want = match cal {
                    Calendar::Day360 => 30,
                    _ if m == 2 && leap_by_rule(cal, y) => 29,
                    _ => month_len[m as usize - 1],
                };
                ensure!(days_in_month(cal, y, m) == Some(want), "{cal} {y}-{m}");
                ensure!(
                    day_number(cal, y, m, want + 1).is_none(),
                    "{cal} {y}-{m}-{} must not exist",
                    want + 1
                );
            }
        }
    }
    Ok(())
}

#[test]
fn day_numbers_round_trip() -> TestResult {
    for cal in Calendar::ALL {
        let start = day_number(cal, -1000, 1, 1).ok_or("start")?;
        let end = day_number(cal, 3000, 1, 1).ok_or("end")?;
        let mut prev = date_of_day_number(cal, start - 1);
        for n in start..end {
            let (y, m, d) = date_of_day_number(cal, n);
            ensure!(day_number(cal, y, m, d) == Some(n), "{cal}: {n} -> {y}-{m}-{d}");
            ensure!((y, m, d) > prev, "{cal}: dates increase with the day number");
            prev = (y, m, d);
        }
    }
    Ok(())
}

#[test]
fn units_spellings_offsets_and_fractions() -> TestResult {
    let std = Calendar::Standard;
    let checks = [
        (0.0, "hours since 2000-01-01 06:00:00 +06:00", "2000-01-01T00:00:00Z"),
        (0.0, "hours since 2000-01-01T06:00:00-0130", "2000-01-01T07:30:00Z"),
        (1.5, "seconds since 1970-01-01T00:00:00Z", "1970-01-01T00:00:01.5Z"),
        (0.25, "days since 2000-01-01", "2000-01-01T06:00:00Z"),
        (-1.0, "days since 2000-01-01", "1999-12-31T00:00:00Z"),
        (90.0, "min since 2000-1-1 0:0:0", "2000-01-01T01:30:00Z"),
        (3.0, "hrs since 2000-01-01 00:00:00 UTC", "2000-01-01T03:00:00Z"),
        (86_400.0, "secs since 2000-01-01 00:00:00.0", "2000-01-02T00:00:00Z"),
        (0.1, "hours since 2000-01-01", "2000-01-01T00:06:00Z"),
        (2.0, "d since 2000-02-28", "2000-03-01T00:00:00Z"),
        // 1970-01-01 + 1 700 000 000 s: the widely noted moment Unix time passed 1.7e9
        // (from memory; it also follows from 19 675 days of 86 400 s plus 80 000 s).
        (1_700_000_000.0, "seconds since 1970-01-01", "2023-11-14T22:13:20Z"),
    ];
    for (v, units, want) in checks {
        let got = decode(v, units, std)?;
        ensure!(got == want, "{v} {units}: {got}, want {want}");
    }
    for bad in [
        "months since 2000-01-01",
        "hours after 2000-01-01",
        "hours since 2000-13-01",
        "hours since yesterday",
    ] {
        let r = decode(0.0, bad, std);
        ensure!(matches!(r, Err(CfError::TimeUnits { .. })), "{bad}: {r:?}");
    }
    let r = decode(f64::NAN, "hours since 2000-01-01", std);
    ensure!(matches!(r, Err(CfError::TimeValue { .. })), "{r:?}");
    ensure!(
        matches!(calendar::parse_calendar(Some("lunar")), Err(CfError::UnknownCalendar { .. })),
        "lunar"
    );
    ensure!(
        calendar::parse_calendar(None)? == Calendar::Standard,
        "CF: no attribute means standard"
    );
    Ok(())
}

#[test]
fn time_selectors() -> TestResult {
    let want = TimeSelector::At("2026-01-15T06:00:00Z".into());
    for text in [
        "2026-01-15T06:00:00Z",
        "2026-01-15T06:00Z",
        "2026-01-15T06:00:00",
        "2026-01-15T06",
        "2026-01-15 06:00",
        "2026-01-15T08:00:00+02:00",
    ] {
        ensure!(TimeSelector::parse(text)? == want, "{text}");
    }
    ensure!(
        TimeSelector::parse("2026-01-15")? == TimeSelector::At("2026-01-15T00:00:00Z".into()),
        "date only"
    );
    ensure!(TimeSelector::parse("LATEST")? == TimeSelector::Latest, "latest");
    for bad in ["tomorrow", "2026-01", "2026-01-15T25:00", "2026-01-15T06:00:00Q"] {
        ensure!(matches!(TimeSelector::parse(bad), Err(CfError::BadTimeSelector { .. })), "{bad}");
    }
    Ok(())
}

#[test]
fn every_calendar_through_a_file() -> TestResult {
    let dir = tmp()?;
    // "days since 2100-02-27", values 1, 2, 3. 2100 is a leap year only in the Julian
    // calendar (and in all_leap); 360_day has a 30 February.
    let cases: [(Option<&str>, Calendar, [&str; 3]); 10] = [
        (None, Calendar::Standard, ["2100-02-28", "2100-03-01", "2100-03-02"]),
        (Some("standard"), Calendar::Standard, ["2100-02-28", "2100-03-01", "2100-03-02"]),
        (Some("gregorian"), Calendar::Standard, ["2100-02-28", "2100-03-01", "2100-03-02"]),
        (
            Some("proleptic_gregorian"),
            Calendar::ProlepticGregorian,
            ["2100-02-28", "2100-03-01", "2100-03-02"],
        ),
        (Some("julian"), Calendar::Julian, ["2100-02-28", "2100-02-29", "2100-03-01"]),
        (Some("noleap"), Calendar::NoLeap, ["2100-02-28", "2100-03-01", "2100-03-02"]),
        (Some("365_day"), Calendar::NoLeap, ["2100-02-28", "2100-03-01", "2100-03-02"]),
        (Some("all_leap"), Calendar::AllLeap, ["2100-02-28", "2100-02-29", "2100-03-01"]),
        (Some("366_day"), Calendar::AllLeap, ["2100-02-28", "2100-02-29", "2100-03-01"]),
        (Some("360_day"), Calendar::Day360, ["2100-02-28", "2100-02-29", "2100-02-30"]),
    ];
    for (attr, cal, dates) in cases {
        let mut axes = Axes::small();
        axes.time = vec![1.0, 2.0, 3.0];
        let mut cdl = axes.cdl();
        let time = cdl.vars.iter_mut().find(|v| v.name == "time").ok_or("time")?;
        time.attrs = vec![("units".into(), "\"days since 2100-02-27\"".into())];
        if let Some(a) = attr {
            time.attrs.push(("calendar".into(), format!("{a:?}")));
        }
        let cdl = fill_pattern(
            cdl.var(Var::new("t", "float", &["time", "level", "lat", "lon"]).text("units", "K")),
            "t",
            0.0,
        );
        let ds = Dataset::open(&cdl.write(dir.path(), "cal", "nc3")?, &VarOverrides::default())?;
        ensure!(ds.calendar() == cal, "{attr:?}: {}", ds.calendar());
        let want: Vec<String> = dates.iter().map(|d| format!("{d}T00:00:00Z")).collect();
        ensure!(ds.times() == want.as_slice(), "{attr:?}: {:?}", ds.times());
        ensure!(ds.time_units() == Some("days since 2100-02-27"), "units");
        let idx = ds.time_index(&TimeSelector::parse(dates[2])?)?;
        ensure!(idx == 2, "{attr:?}: index {idx}");
    }
    Ok(())
}

#[test]
fn zones_with_non_ascii_text_are_refused_not_a_panic() {
    // Inputs found by the fuzzer (fuzz/regressions): a four-byte "zone" that is not four
    // characters used to be cut inside a character.
    assert!(TimeSelector::parse("4052-01-15    016-9\u{8850}").is_err());
    assert!(calendar::parse_units("seconds since 0985-1-1 0 -d\u{710c}").is_err());
    assert!(calendar::parse_iso("2026-01-15T06:00+\u{e9}5").is_err());
    // A year so large that shifting it by a zone overflowed the day arithmetic.
    assert!(TimeSelector::parse("26100777777257670-12-5 12-5").is_err());
    assert!(TimeSelector::parse("100000000-12-05T12:00-05:00").is_ok());
}

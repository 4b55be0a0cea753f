//! Time columns: parsing a cell as a number, an ISO date or an ISO
//! date-time; the proleptic Gregorian calendar arithmetic behind it (no time
//! zones: values are naive and measured in seconds since
//! 1970-01-01T00:00:00); writing values back in the format they were read
//! in; and deciding whether a column is regularly spaced. Never reads files.

use crate::codebook::{TimeAxis, TimeFormat};

use super::table::RecordTable;

const SECONDS_PER_DAY: i64 = 86_400;

/// A calendar date in the proleptic Gregorian calendar.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct CivilDate {
    /// Year, astronomical numbering (year 0 exists).
    pub year: i64,
    /// Month, 1–12.
    pub month: u32,
    /// Day of the month, 1–31.
    pub day: u32,
}

/// One time cell, parsed.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ParsedTime {
    /// The number itself, or seconds since 1970-01-01T00:00:00 for dates
    /// and date-times.
    pub value: f64,
    /// How the text was written.
    pub format: TimeFormat,
}

/// Days from 1970-01-01 to `date` (negative before it). The date is not
/// checked: a day past the end of its month rolls into the next month.
pub fn days_from_civil(date: CivilDate) -> i64 {
    // Count years from March so that the leap day is the last day of the
    // counted year; whole 400-year cycles have a fixed 146 097 days.
    let month = i64::from(date.month);
    let year = if month <= 2 { date.year - 1 } else { date.year };
    let cycle = year.div_euclid(400);
    let year_of_cycle = year - cycle * 400;
    let month_from_march = (month + 9) % 12;
    // Days before each month counted from March: 31, 30, 31, 30, 31 repeat,
    // which (153 m + 2) / 5 reproduces exactly.
    let day_of_year = (153 * month_from_march + 2) / 5 + i64::from(date.day) - 1;
    let day_of_cycle = year_of_cycle * 365 + year_of_cycle / 4 - year_of_cycle / 100 + day_of_year;
    // 719 468 days separate 0000-03-01 from 1970-01-01.
    cycle * 146_097 + day_of_cycle - 719_468
}

/// The date `days` days after 1970-01-01 (before it when negative); the
/// inverse of [`days_from_civil`] for valid dates.
pub fn civil_from_days(days: i64) -> CivilDate {
    let shifted = days + 719_468;
    let cycle = shifted.div_euclid(146_097);
    let day_of_cycle = shifted - cycle * 146_097;
    let year_of_cycle = (day_of_cycle - day_of_cycle / 1_460 + day_of_cycle / 36_524
        - day_of_cycle / 146_096)
        / 365;
    let day_of_year =
        day_of_cycle - (365 * year_of_cycle + year_of_cycle / 4 - year_of_cycle / 100);
    let month_from_march = (5 * day_of_year + 2) / 153;
    let day = day_of_year - (153 * month_from_march + 2) / 5 + 1;
    let month = if month_from_march < 10 {
        month_from_march + 3
    } else {
        month_from_march - 9
    };
    let year = year_of_cycle + cycle * 400 + i64::from(month <= 2);
    CivilDate {
        year,
        month: month as u32,
        day: day as u32,
    }
}

fn is_leap(year: i64) -> bool {
    year.rem_euclid(4) == 0 && (year.rem_euclid(100) != 0 || year.rem_euclid(400) == 0)
}

fn days_in_month(year: i64, month: u32) -> u32 {
    match month {
        2 if is_leap(year) => 29,
        2 => 28,
        4 | 6 | 9 | 11 => 30,
        _ => 31,
    }
}

/// Parses a time cell (surrounding spaces ignored): a finite number, a date
/// `YYYY-MM-DD` (or `YYYY/MM/DD`), or a date-time `YYYY-MM-DDTHH:MM` / `YYYY-MM-DDTHH:MM:SS`
/// (a space may replace the `T`). Dates must exist (no 2023-02-29). Time
/// zones and fractions of a second are not accepted. `None` when the text is
/// none of these.
pub fn parse_time(text: &str) -> Option<ParsedTime> {
    let text = text.trim();
    if let Ok(value) = text.parse::<f64>() {
        return value.is_finite().then(|| ParsedTime {
            value,
            format: TimeFormat::Number {
                decimals: decimals_of(text),
            },
        });
    }
    parse_iso(text)
}

/// Digits after the decimal point (before any exponent).
fn decimals_of(text: &str) -> u32 {
    text.split_once('.').map_or(0, |(_, frac)| {
        frac.bytes().take_while(u8::is_ascii_digit).count() as u32
    })
}

fn digits(bytes: &[u8]) -> Option<u32> {
    bytes.iter().try_fold(0u32, |acc, &b| {
        b.is_ascii_digit().then(|| acc * 10 + u32::from(b - b'0'))
    })
}

fn parse_iso(text: &str) -> Option<ParsedTime> {
    let b = text.as_bytes();
    if !matches!(b.len(), 10 | 16 | 19) || b[4] != b[7] || !matches!(b[4], b'-' | b'/') {
        return None;
    }
    let slashes = b[4] == b'/';
    let year = i64::from(digits(&b[0..4])?);
    let month = digits(&b[5..7])?;
    let day = digits(&b[8..10])?;
    if !(1..=12).contains(&month) || day == 0 || day > days_in_month(year, month) {
        return None;
    }
    let days = days_from_civil(CivilDate { year, month, day });
    if b.len() == 10 {
        return Some(ParsedTime {
            value: (days * SECONDS_PER_DAY) as f64,
            format: TimeFormat::Date { slashes },
        });
    }
    let t_separator = match b[10] {
        b'T' => true,
        b' ' => false,
        _ => return None,
    };
    if b[13] != b':' {
        return None;
    }
    let hour = i64::from(digits(&b[11..13])?);
    let minute = i64::from(digits(&b[14..16])?);
    let (seconds, second) = if b.len() == 19 {
        if b[16] != b':' {
            return None;
        }
        (true, i64::from(digits(&b[17..19])?))
    } else {
        (false, 0)
    };
    if hour > 23 || minute > 59 || second > 59 {
        return None;
    }
    Some(ParsedTime {
        value: (days * SECONDS_PER_DAY + hour * 3_600 + minute * 60 + second) as f64,
        format: TimeFormat::DateTime {
            t_separator,
            seconds,
            slashes,
        },
    })
}

/// Writes a time value in `format`: numbers with the format's decimals,
/// dates and date-times from seconds since 1970-01-01 (rounded to the whole
/// second; seconds are written when the format has them or the value is not
/// on a whole minute).
pub fn format_time(value: f64, format: TimeFormat) -> String {
    match format {
        TimeFormat::Number { decimals } => {
            // Adding 0.0 turns −0 into 0 so "-0" is never written.
            format!("{:.*}", decimals as usize, value + 0.0)
        }
        TimeFormat::Date { slashes } | TimeFormat::DateTime { slashes, .. } => {
            let total = value.round() as i64;
            let date = civil_from_days(total.div_euclid(SECONDS_PER_DAY));
            let year = if (0..=9999).contains(&date.year) {
                format!("{:04}", date.year)
            } else {
                date.year.to_string()
            };
            let ds = if slashes { '/' } else { '-' };
            let day_text = format!("{year}{ds}{:02}{ds}{:02}", date.month, date.day);
            let TimeFormat::DateTime {
                t_separator,
                seconds,
                ..
            } = format
            else {
                return day_text;
            };
            let in_day = total.rem_euclid(SECONDS_PER_DAY);
            let (h, m, s) = (in_day / 3_600, in_day / 60 % 60, in_day % 60);
            let sep = if t_separator { 'T' } else { ' ' };
            if seconds || s != 0 {
                format!("{day_text}{sep}{h:02}:{m:02}:{s:02}")
            } else {
                format!("{day_text}{sep}{h:02}:{m:02}")
            }
        }
    }
}

/// The format that covers both cells of one column, or `None` when they are
/// different kinds (a number and a date, say).
pub(crate) fn merge_formats(seen: TimeFormat, next: TimeFormat) -> Option<TimeFormat> {
    match (seen, next) {
        (TimeFormat::Number { decimals: a }, TimeFormat::Number { decimals: b }) => {
            Some(TimeFormat::Number { decimals: a.max(b) })
        }
        (TimeFormat::Date { slashes: a }, TimeFormat::Date { slashes: b }) if a == b => {
            Some(TimeFormat::Date { slashes: a })
        }
        (
            TimeFormat::DateTime {
                t_separator,
                seconds: a,
                slashes,
            },
            TimeFormat::DateTime {
                seconds: b,
                slashes: slashes_b,
                ..
            },
        ) if slashes == slashes_b => Some(TimeFormat::DateTime {
            t_separator,
            seconds: a || b,
            slashes,
        }),
        _ => None,
    }
}

/// A short description of a time format for messages.
pub(crate) fn describe(format: TimeFormat) -> &'static str {
    match format {
        TimeFormat::Number { .. } => "a number",
        TimeFormat::Date { .. } => "a date (YYYY-MM-DD or YYYY/MM/DD)",
        TimeFormat::DateTime { .. } => "a date and time (YYYY-MM-DDTHH:MM[:SS])",
    }
}

/// What a record table's time column allows decode to write back.
#[derive(Debug, Clone, PartialEq)]
pub enum TimeInfo {
    /// The table has no time column.
    Absent,
    /// Evenly spaced: only the start and the step need storing. A single row
    /// gives a step of 0.
    Regular(TimeAxis),
    /// Not evenly spaced (or two rows share a time): decode writes a row
    /// number instead. The notice says so for the user.
    Irregular {
        /// The message for the user.
        notice: String,
    },
}

/// Running test for even spacing, fed one time at a time, so a table and a
/// stream reach the same verdict. Every consecutive difference must equal
/// the first within 1e-9 of it, and the first must not be 0.
#[derive(Debug, Clone, Default)]
pub(crate) struct AxisCheck {
    count: u64,
    start: f64,
    previous: f64,
    step: f64,
    regular: bool,
}

impl AxisCheck {
    /// Takes the next row's time.
    pub(crate) fn push(&mut self, time: f64) {
        match self.count {
            0 => {
                self.start = time;
                self.regular = true;
            }
            1 => {
                self.step = time - self.start;
                self.regular = self.step != 0.0 && self.step.is_finite();
            }
            _ => {
                let difference = time - self.previous;
                if (difference - self.step).abs() > 1e-9 * self.step.abs() {
                    self.regular = false;
                }
            }
        }
        self.previous = time;
        self.count += 1;
    }

    /// The verdict for the times pushed so far.
    pub(crate) fn verdict(&self, column: &str, format: TimeFormat) -> TimeInfo {
        if self.count == 0 {
            return TimeInfo::Absent;
        }
        if self.regular {
            TimeInfo::Regular(TimeAxis {
                start: self.start,
                step: if self.count == 1 { 0.0 } else { self.step },
                format,
            })
        } else {
            TimeInfo::Irregular {
                notice: format!(
                    "time column \"{column}\" is not regularly spaced; decode writes a row number instead"
                ),
            }
        }
    }
}

/// Decides whether the table's time column is regularly spaced, over the
/// rows actually kept (rows dropped for missing values leave a gap, which
/// makes the axis irregular unless the spacing still holds).
pub fn time_axis(table: &RecordTable) -> TimeInfo {
    let Some(times) = &table.times else {
        return TimeInfo::Absent;
    };
    let mut check = AxisCheck::default();
    for &t in &times.values {
        check.push(t);
    }
    check.verdict(&times.name, times.format)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn secs(text: &str) -> f64 {
        parse_time(text).unwrap().value
    }

    #[test]
    fn known_dates_to_seconds() {
        // Expected values computed with Python's datetime:
        // datetime.fromisoformat(s).replace(tzinfo=timezone.utc).timestamp()
        assert_eq!(secs("1970-01-01"), 0.0);
        assert_eq!(secs("2000-03-01"), 951_868_800.0);
        assert_eq!(secs("2024-02-29T12:00:00"), 1_709_208_000.0);
        assert_eq!(secs("2000-02-29"), 951_782_400.0);
        assert_eq!(secs("1900-03-01"), -2_203_891_200.0);
        assert_eq!(secs("1969-12-31T23:59"), -60.0);
        assert_eq!(secs("2100-03-01"), 4_107_542_400.0);
        assert_eq!(secs("0001-01-01"), -62_135_596_800.0);
        assert_eq!(secs("9999-12-31 23:59:59"), 253_402_300_799.0);
    }

    #[test]
    fn days_round_trip_over_many_centuries() {
        // Consecutive day numbers must give consecutive valid dates.
        let mut previous = civil_from_days(-800_000);
        assert_eq!(days_from_civil(previous), -800_000);
        for d in -799_999..800_000 {
            let date = civil_from_days(d);
            assert_eq!(days_from_civil(date), d);
            assert!(date.day >= 1 && date.day <= days_in_month(date.year, date.month));
            if date.day == 1 {
                assert_eq!(previous.day, days_in_month(previous.year, previous.month));
            } else {
                assert_eq!(date.day, previous.day + 1);
            }
            previous = date;
        }
    }

    #[test]
    fn leap_year_rules() {
        // Gregorian rule, common practice: every 4th year, not centuries,
        // except every 400th.
        assert!(is_leap(2024) && is_leap(2000) && is_leap(1600));
        assert!(!is_leap(1900) && !is_leap(2100) && !is_leap(2023));
        assert!(parse_time("2024-02-29").is_some());
        assert!(parse_time("2000-02-29").is_some());
        assert!(parse_time("1900-02-29").is_none());
        assert!(parse_time("2023-02-29").is_none());
    }

    #[test]
    fn shapes_are_recognised() {
        assert_eq!(
            parse_time(" 12.250 ").unwrap().format,
            TimeFormat::Number { decimals: 3 }
        );
        assert_eq!(
            parse_time("1e3").unwrap(),
            ParsedTime {
                value: 1000.0,
                format: TimeFormat::Number { decimals: 0 }
            }
        );
        assert_eq!(
            parse_time("2024-05-06").unwrap().format,
            TimeFormat::Date { slashes: false }
        );
        assert_eq!(
            parse_time("2024-05-06T07:08").unwrap().format,
            TimeFormat::DateTime {
                t_separator: true,
                seconds: false,
                slashes: false,
            }
        );
        assert_eq!(
            parse_time("2024-05-06 07:08:09").unwrap().format,
            TimeFormat::DateTime {
                t_separator: false,
                seconds: true,
                slashes: false,
            }
        );
    }

    #[test]
    fn bad_times_are_rejected() {
        for text in [
            "",
            "inf",
            "NaN",
            "2024-13-01",
            "2024-04-31",
            "2024-1-01",
            "2024/01-01",
            "2024-01-01T24:00",
            "2024-01-01T12:60",
            "2024-01-01T12:00:60",
            "2024-01-01T12:00Z",
            "2024-01-01T12:00:00.5",
            "2024-01-01x12:00",
            "noon",
        ] {
            assert!(parse_time(text).is_none(), "{text:?}");
        }
    }

    #[test]
    fn formats_write_back_what_was_read() {
        for text in [
            "1970-01-01",
            "2024-02-29",
            "0001-01-01",
            "2024-02-29T12:00:00",
            "1969-12-31 23:59",
            "2000-03-01T00:00",
            "12.250",
            "-3",
            "0.5",
        ] {
            let p = parse_time(text).unwrap();
            assert_eq!(format_time(p.value, p.format), text);
        }
        assert_eq!(format_time(-0.0, TimeFormat::Number { decimals: 0 }), "0");
    }

    #[test]
    fn merging_keeps_the_widest_format() {
        let n = |d| TimeFormat::Number { decimals: d };
        assert_eq!(merge_formats(n(1), n(3)), Some(n(3)));
        assert_eq!(
            merge_formats(n(1), TimeFormat::Date { slashes: false }),
            None
        );
        let dt = |t, s| TimeFormat::DateTime {
            t_separator: t,
            seconds: s,
            slashes: false,
        };
        assert_eq!(
            merge_formats(dt(true, false), dt(false, true)),
            Some(dt(true, true))
        );
        assert_eq!(
            merge_formats(TimeFormat::Date { slashes: false }, dt(true, true)),
            None
        );
    }

    fn verdict(times: &[f64]) -> TimeInfo {
        let mut check = AxisCheck::default();
        times.iter().for_each(|&t| check.push(t));
        check.verdict("t", TimeFormat::Number { decimals: 1 })
    }

    #[test]
    fn regular_and_irregular_spacing() {
        let format = TimeFormat::Number { decimals: 1 };
        assert_eq!(
            verdict(&[0.0, 0.1, 0.2, 0.30000000000000004, 0.4]),
            TimeInfo::Regular(TimeAxis {
                start: 0.0,
                step: 0.1,
                format
            })
        );
        assert_eq!(
            verdict(&[5.0, 3.0, 1.0]),
            TimeInfo::Regular(TimeAxis {
                start: 5.0,
                step: -2.0,
                format
            })
        );
        assert_eq!(
            verdict(&[7.0]),
            TimeInfo::Regular(TimeAxis {
                start: 7.0,
                step: 0.0,
                format
            })
        );
        let irregular = TimeInfo::Irregular {
            notice: "time column \"t\" is not regularly spaced; decode writes a row number instead"
                .into(),
        };
        assert_eq!(verdict(&[0.0, 1.0, 3.0]), irregular);
        assert_eq!(verdict(&[2.0, 2.0, 2.0]), irregular);
        assert_eq!(verdict(&[]), TimeInfo::Absent);
    }
}

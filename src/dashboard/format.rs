//! Times, durations, counts and sizes as the dashboard writes them: times in the
//! chosen zone with its name, durations as "3 h 20 min".

use jiff::tz::TimeZone;
use jiff::{SignedDuration, Timestamp};

/// A duration in words a person reads at a glance: "45 s", "12 min", "3 h 20 min",
/// "2 d 5 h". Negative durations read as their size.
pub fn duration(d: SignedDuration) -> String {
    let secs = d.as_secs().unsigned_abs();
    let (days, hours, mins) = (secs / 86_400, secs % 86_400 / 3600, secs % 3600 / 60);
    match (days, hours, mins) {
        (0, 0, 0) => format!("{secs} s"),
        (0, 0, m) => format!("{m} min"),
        (0, h, 0) => format!("{h} h"),
        (0, h, m) => format!("{h} h {m} min"),
        (d, 0, _) => format!("{d} d"),
        (d, h, _) => format!("{d} d {h} h"),
    }
}

/// A moment with its date and zone: "Tue 19 May 14:05 CEST".
pub fn moment(t: Timestamp, zone: &TimeZone) -> String {
    t.to_zoned_datetime(zone.clone())
        .strftime("%a %-d %b %H:%M %Z")
        .to_string()
}

/// A moment in a narrow column: the time alone when it falls on the same day as
/// `now`, the weekday and time within six days either way, the date further out.
pub fn short_moment(t: Timestamp, now: Timestamp, zone: &TimeZone) -> String {
    let z = t.to_zoned_datetime(zone.clone());
    let today = now.to_zoned_datetime(zone.clone()).date();
    let days = z.date().since(today).map_or(i32::MAX, |s| s.get_days());
    if days == 0 {
        z.strftime("%H:%M").to_string()
    } else if (-6..7).contains(&days) {
        z.strftime("%a %H:%M").to_string()
    } else {
        z.strftime("%-d %b").to_string()
    }
}

/// A count with thin groups: 1 234 567.
pub fn count(n: u64) -> String {
    let digits = n.to_string();
    let mut out = String::new();
    for (i, c) in digits.chars().enumerate() {
        if i > 0 && (digits.len() - i).is_multiple_of(3) {
            out.push(' ');
        }
        out.push(c);
    }
    out
}

/// A number of bytes: "812 B", "3.4 MB", "1.1 GB" (powers of 1000).
pub fn bytes(n: u64) -> String {
    let n = n as f64;
    if n < 1e3 {
        format!("{n} B")
    } else if n < 1e6 {
        format!("{:.1} kB", n / 1e3)
    } else if n < 1e9 {
        format!("{:.1} MB", n / 1e6)
    } else {
        format!("{:.2} GB", n / 1e9)
    }
}

/// A proportion as a percentage with one decimal: "35.7%".
pub fn percent1(x: f64) -> String {
    format!("{:.1}%", 100.0 * x)
}

/// A margin in points with one decimal: "±14.1".
pub fn points1(x: f64) -> String {
    format!("±{:.1}", 100.0 * x)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn durations_read_at_a_glance() {
        let d = |s: i64| duration(SignedDuration::from_secs(s));
        assert_eq!(d(0), "0 s");
        assert_eq!(d(45), "45 s");
        assert_eq!(d(12 * 60 + 59), "12 min");
        assert_eq!(d(3 * 3600), "3 h");
        assert_eq!(d(3 * 3600 + 20 * 60), "3 h 20 min");
        assert_eq!(d(2 * 86_400 + 5 * 3600 + 59 * 60), "2 d 5 h");
        assert_eq!(d(9 * 86_400 + 30), "9 d");
        assert_eq!(d(-90), "1 min");
    }

    #[test]
    fn moments_carry_their_zone() {
        let t: Timestamp = "2026-05-19T12:05:00Z".parse().unwrap();
        assert_eq!(moment(t, &TimeZone::UTC), "Tue 19 May 12:05 UTC");
        let plus2 = TimeZone::fixed(jiff::tz::offset(2));
        assert_eq!(moment(t, &plus2), "Tue 19 May 14:05 +02");
        let now: Timestamp = "2026-05-19T06:00:00Z".parse().unwrap();
        assert_eq!(short_moment(t, now, &TimeZone::UTC), "12:05");
        let later: Timestamp = "2026-05-21T09:10:00Z".parse().unwrap();
        assert_eq!(short_moment(later, now, &TimeZone::UTC), "Thu 09:10");
        let before: Timestamp = "2026-05-17T22:40:00Z".parse().unwrap();
        assert_eq!(short_moment(before, now, &TimeZone::UTC), "Sun 22:40");
        let far: Timestamp = "2026-06-12T09:10:00Z".parse().unwrap();
        assert_eq!(short_moment(far, now, &TimeZone::UTC), "12 Jun");
    }

    #[test]
    fn counts_and_sizes() {
        assert_eq!(count(0), "0");
        assert_eq!(count(999), "999");
        assert_eq!(count(1000), "1 000");
        assert_eq!(count(1_234_567), "1 234 567");
        assert_eq!(bytes(812), "812 B");
        assert_eq!(bytes(3_400_000), "3.4 MB");
        assert_eq!(bytes(1_100_000_000), "1.10 GB");
        assert_eq!(percent1(0.3571), "35.7%");
        assert_eq!(points1(0.1412), "±14.1");
    }
}

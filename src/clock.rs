//! The moment "now", injected: the wall clock, a fixed moment, or a simulated clock
//! that runs faster than real time (the demo's). Everything that asks the time in a
//! loop (the follow loops, the dashboard, the demo's writer) takes a [`Clock`], so
//! rates, ETAs and clocks are deterministic wherever a test fixes them.

use std::time::Instant;

use jiff::{SignedDuration, Timestamp};

/// Where "now" comes from.
#[derive(Clone, Copy, Debug)]
pub enum Clock {
    /// The system's clock.
    System,
    /// Always the same moment.
    Fixed(Timestamp),
    /// Simulated time: `start` at the real moment `began`, then `speed` simulated
    /// seconds for every real second.
    Simulated {
        start: Timestamp,
        began: Instant,
        speed: f64,
    },
}

impl Clock {
    /// A simulated clock that reads `start` now and runs `speed` times real time.
    pub fn simulated(start: Timestamp, speed: f64) -> Clock {
        Clock::Simulated {
            start,
            began: Instant::now(),
            speed,
        }
    }

    /// The time now, by this clock.
    pub fn now(&self) -> Timestamp {
        match *self {
            Clock::System => Timestamp::now(),
            Clock::Fixed(t) => t,
            Clock::Simulated {
                start,
                began,
                speed,
            } => {
                let real = began.elapsed().as_secs_f64();
                let simulated = SignedDuration::try_from_secs_f64(real * speed.max(0.0))
                    .unwrap_or(SignedDuration::MAX);
                start.checked_add(simulated).unwrap_or(Timestamp::MAX)
            }
        }
    }

    /// Whether the time is not the real time (shown as such wherever it is shown).
    pub fn is_simulated(&self) -> bool {
        matches!(self, Clock::Simulated { .. })
    }

    /// Real time until this clock reads `t` (zero if it already has; for the wall
    /// clock and a fixed clock, the plain difference, or zero).
    pub fn real_time_until(&self, t: Timestamp) -> std::time::Duration {
        let ahead = t.duration_since(self.now()).as_secs_f64().max(0.0);
        let real = match *self {
            Clock::Simulated { speed, .. } if speed > 0.0 => ahead / speed,
            Clock::Simulated { .. } => f64::INFINITY,
            Clock::System | Clock::Fixed(_) => ahead,
        };
        std::time::Duration::try_from_secs_f64(real).unwrap_or(std::time::Duration::MAX)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_fixed_clock_does_not_move_and_a_simulated_one_runs_at_its_speed() {
        let t: Timestamp = "2026-03-02T08:00:00Z".parse().unwrap();
        assert_eq!(Clock::Fixed(t).now(), t);
        assert!(!Clock::Fixed(t).is_simulated());
        let began = Instant::now() - std::time::Duration::from_secs(2);
        let clock = Clock::Simulated {
            start: t,
            began,
            speed: 3600.0,
        };
        // At least two real seconds have passed: at least two simulated hours.
        let now = clock.now();
        assert!(now >= t + SignedDuration::from_hours(2), "{now}");
        assert!(clock.is_simulated());
        // An hour ahead of the simulated clock is about a real second away.
        let wait = clock.real_time_until(now + SignedDuration::from_hours(1));
        assert!(wait <= std::time::Duration::from_secs(1), "{wait:?}");
        assert_eq!(
            clock.real_time_until(t),
            std::time::Duration::ZERO,
            "the past is no wait"
        );
    }
}

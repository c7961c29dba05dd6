//! Switch instants of a known schedule (rigs whose switch is clocked with
//! the receiver): dwell length, lobe order and the time of a first-lobe
//! start; earlier samples belong to the previous lobes, cyclically.

use super::switch_sync::SwitchEvent;
use std::collections::VecDeque;
use std::sync::Arc;

/// Settings of a known switch schedule, in samples.
#[derive(Clone, Debug)]
pub struct ScheduleSettings {
    pub names: Vec<Arc<str>>,
    /// Sample position (may be fractional or negative) where lobe 0's dwell starts.
    pub first_start: f64,
    /// Dwell length in samples (may be fractional).
    pub dwell: f64,
}

/// Switch instants of a known schedule: the dwell `m` starts at sample
/// `ceil(first_start + m * dwell)` and belongs to lobe `m mod N`.
pub struct ScheduleTracker {
    settings: ScheduleSettings,
    next_dwell: Option<i64>,
    next_index: u64,
    events: VecDeque<SwitchEvent>,
}

impl ScheduleTracker {
    pub fn new(settings: ScheduleSettings) -> Result<ScheduleTracker, String> {
        if settings.dwell.is_nan() || settings.dwell < 1.0 {
            return Err(format!(
                "schedule dwell is {:.3} samples; it must be at least one sample (set 'dwell')",
                settings.dwell
            ));
        }
        Ok(ScheduleTracker { settings, next_dwell: None, next_index: 0, events: VecDeque::new() })
    }

    /// First sample of dwell `m` (may be negative).
    pub fn boundary(&self, m: i64) -> i64 {
        (self.settings.first_start + m as f64 * self.settings.dwell).ceil() as i64
    }

    /// Lobe position of dwell `m`.
    pub fn lobe_of(&self, m: i64) -> usize {
        m.rem_euclid(self.settings.names.len() as i64) as usize
    }

    /// The dwell holding sample `n`.
    pub fn dwell_of(&self, n: i64) -> i64 {
        let mut m = ((n as f64 - self.settings.first_start) / self.settings.dwell).floor() as i64;
        while self.boundary(m + 1) <= n {
            m += 1;
        }
        while self.boundary(m) > n {
            m -= 1;
        }
        m
    }

    pub fn feed(&mut self, index: u64, len: usize) {
        let end = index + len as u64;
        if len == 0 || end <= self.next_index {
            return;
        }
        let next = match self.next_dwell {
            Some(m) => m,
            None => {
                let m = self.dwell_of(index as i64);
                self.events.push_back(SwitchEvent::Begin {
                    at: index,
                    lobe: self.lobe_of(m),
                    switch_at: Some(self.boundary(m)),
                });
                m + 1
            }
        };
        let mut m = next;
        while self.boundary(m) < end as i64 {
            let at = self.boundary(m).max(0) as u64;
            self.events.push_back(SwitchEvent::Switch { at, lobe: self.lobe_of(m) });
            m += 1;
        }
        self.next_dwell = Some(m);
        self.next_index = end;
    }

    pub fn pop_event(&mut self) -> Option<SwitchEvent> {
        self.events.pop_front()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn names(n: usize) -> Vec<Arc<str>> {
        (0..n).map(|i| Arc::from(format!("l{i}"))).collect()
    }

    #[test]
    fn schedule_floors_negative_times() {
        let t = ScheduleTracker::new(ScheduleSettings { names: names(4), first_start: 250.5, dwell: 100.0 }).unwrap();
        // Sample 250 lies before the start of lobe 0: it belongs to lobe 3 (floor of a negative).
        assert_eq!(t.lobe_of(t.dwell_of(250)), 3);
        assert_eq!(t.lobe_of(t.dwell_of(251)), 0);
        assert_eq!(t.lobe_of(t.dwell_of(0)), 1);
        assert_eq!(t.boundary(-3), -49);
        assert_eq!(t.boundary(1), 351);
    }
}

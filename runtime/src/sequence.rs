//! Pulse sequences: pulses of the declared fields placed in time, with waits and overlaps.

use crate::envelope::Envelope;
use crate::error::Error;

/// How a pulse sets its amplitude.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Amplitude {
    /// Multiply the field's strength by this factor (1 = the field as declared).
    Scale(f64),
    /// Choose the amplitude so that ∫ Ω(t) dt = area (rad) on the field's reference transition
    /// (the area theorem's pulse area).
    Area(f64),
}

/// One pulse of a field.
#[derive(Clone, Debug)]
pub struct Pulse {
    field: usize,
    envelope: Envelope,
    start: f64,
    amplitude: Amplitude,
    phase: f64,
}

impl Pulse {
    /// A pulse of field `field` (index into the scenario's fields) with the given envelope, at
    /// full field strength and no extra phase. Its start is set when it is placed in a sequence.
    pub fn new(field: usize, envelope: Envelope) -> Self {
        Self {
            field,
            envelope,
            start: 0.0,
            amplitude: Amplitude::Scale(1.0),
            phase: 0.0,
        }
    }
    /// Set the pulse area (rad) on the field's reference transition.
    pub fn area(mut self, area: f64) -> Self {
        self.amplitude = Amplitude::Area(area);
        self
    }
    /// Scale the field's strength.
    pub fn scale(mut self, factor: f64) -> Self {
        self.amplitude = Amplitude::Scale(factor);
        self
    }
    /// Add a phase (rad) to the field's phase for this pulse.
    pub fn phase(mut self, phase: f64) -> Self {
        self.phase = phase;
        self
    }
    /// Field index.
    pub fn field(&self) -> usize {
        self.field
    }
    /// Envelope.
    pub fn envelope(&self) -> &Envelope {
        &self.envelope
    }
    /// Start time (s).
    pub fn start(&self) -> f64 {
        self.start
    }
    /// End time (s).
    pub fn end(&self) -> f64 {
        self.start + self.envelope.duration()
    }
    /// Amplitude rule.
    pub fn amplitude(&self) -> Amplitude {
        self.amplitude
    }
    /// Extra phase (rad).
    pub fn extra_phase(&self) -> f64 {
        self.phase
    }
    /// Envelope value at absolute time t (zero outside the pulse).
    #[inline]
    pub fn value_at(&self, t: f64) -> f64 {
        let tau = t - self.start;
        if tau < 0.0 || tau > self.envelope.duration() {
            0.0
        } else {
            self.envelope.value(tau)
        }
    }
}

/// Pulses in time. Overlaps are allowed; the sequence lasts until its last pulse or wait ends.
#[derive(Clone, Debug)]
pub struct Sequence {
    pulses: Vec<Pulse>,
    duration: f64,
}

impl Sequence {
    /// Start a sequence at t = 0.
    pub fn builder() -> SequenceBuilder {
        SequenceBuilder::default()
    }
    /// The pulses, in the order they were added.
    pub fn pulses(&self) -> &[Pulse] {
        &self.pulses
    }
    /// Total duration (s).
    pub fn duration(&self) -> f64 {
        self.duration
    }
    /// All times where some envelope starts, stops or has a kink, sorted, including 0 and the end.
    pub fn breakpoints(&self) -> Vec<f64> {
        let mut b = vec![0.0, self.duration];
        for p in &self.pulses {
            b.push(p.start);
            b.push(p.end());
            b.extend(p.envelope.breakpoints().iter().map(|x| x + p.start));
        }
        b.retain(|x| *x >= 0.0 && *x <= self.duration);
        b.sort_by(f64::total_cmp);
        b.dedup_by(|a, b| (*a - *b).abs() <= 1e-15 * self.duration.max(1e-300));
        b
    }
}

/// Places pulses one after another (with [`SequenceBuilder::then`] and
/// [`SequenceBuilder::wait`]) or at absolute times ([`SequenceBuilder::at`]).
#[derive(Clone, Debug, Default)]
pub struct SequenceBuilder {
    pulses: Vec<Pulse>,
    cursor: f64,
    end: f64,
    /// The first bad time given: (what, value, allowed range).
    bad: Option<(&'static str, f64, &'static str)>,
}

impl SequenceBuilder {
    /// Append a pulse at the cursor; the cursor moves to its end.
    pub fn then(&mut self, pulse: Pulse) -> &mut Self {
        let t = self.cursor;
        self.at(t, pulse);
        self.cursor = t + self.pulses.last().map_or(0.0, |p| p.envelope.duration());
        self
    }
    /// Advance the cursor by a wait (s).
    pub fn wait(&mut self, duration: f64) -> &mut Self {
        if !duration.is_finite() || duration < 0.0 {
            self.bad
                .get_or_insert(("a wait", duration, "waits are finite and non-negative"));
            return self;
        }
        self.cursor += duration;
        self.end = self.end.max(self.cursor);
        self
    }
    /// Place a pulse at an absolute start time (s); the cursor does not move.
    pub fn at(&mut self, start: f64, mut pulse: Pulse) -> &mut Self {
        if !start.is_finite() || start < 0.0 {
            self.bad
                .get_or_insert(("a pulse's start time", start, "pulses start at t ≥ 0"));
            return self;
        }
        pulse.start = start;
        self.end = self.end.max(pulse.end());
        self.pulses.push(pulse);
        self
    }
    /// Finish; fails on bad times, bad pulse amplitudes or phases, or an empty sequence of zero length.
    pub fn build(&self) -> Result<Sequence, Error> {
        if let Some((what, value, hint)) = self.bad {
            return Err(Error::OutOfRange {
                what: what.into(),
                value,
                hint,
            });
        }
        for p in &self.pulses {
            let (what, v) = match p.amplitude {
                Amplitude::Scale(s) => ("a pulse's amplitude scale", s),
                Amplitude::Area(a) => ("a pulse's area", a),
            };
            if !v.is_finite() {
                return Err(Error::NonFinite { what: what.into() });
            }
            if !p.phase.is_finite() {
                return Err(Error::NonFinite {
                    what: "a pulse's phase".into(),
                });
            }
        }
        if self.end <= 0.0 {
            return Err(Error::OutOfRange {
                what: "the sequence's duration".into(),
                value: self.end,
                hint: "a sequence needs at least one pulse or wait of positive length",
            });
        }
        Ok(Sequence {
            pulses: self.pulses.clone(),
            duration: self.end,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::envelope::Shape;

    #[test]
    fn places_pulses_and_waits() {
        let sq = |d| Envelope::new(Shape::Square, d).unwrap();
        let seq = Sequence::builder()
            .then(Pulse::new(0, sq(1.0)))
            .wait(2.0)
            .then(Pulse::new(0, sq(1.0)).phase(0.5))
            .at(0.5, Pulse::new(1, sq(0.25)))
            .build()
            .unwrap();
        assert_eq!(seq.duration(), 4.0);
        assert_eq!(seq.pulses()[1].start(), 3.0);
        assert_eq!(seq.breakpoints(), vec![0.0, 0.5, 0.75, 1.0, 3.0, 4.0]);
        assert_eq!(seq.pulses()[0].value_at(0.5), 1.0);
        assert_eq!(seq.pulses()[0].value_at(1.5), 0.0);
    }

    #[test]
    fn rejects_bad_times() {
        let sq = Envelope::new(Shape::Square, 1.0).unwrap();
        assert!(
            Sequence::builder()
                .wait(-1.0)
                .then(Pulse::new(0, sq.clone()))
                .build()
                .is_err()
        );
        assert!(
            Sequence::builder()
                .at(f64::NAN, Pulse::new(0, sq.clone()))
                .build()
                .is_err()
        );
        assert!(Sequence::builder().build().is_err());
        assert!(
            Sequence::builder()
                .then(Pulse::new(0, sq).area(f64::INFINITY))
                .build()
                .is_err()
        );
    }
}

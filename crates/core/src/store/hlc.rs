//! Hybrid logical clock (Kulkarni, Demirbas et al. 2014, "Logical Physical
//! Clocks"): a timestamp that follows wall-clock milliseconds when the clock
//! is sane and never goes backwards when it is not.
//!
//! Packed into one `i64`: the upper bits are milliseconds since the Unix
//! epoch, the lower 16 bits a counter for events within one millisecond.

/// Bits of the logical counter.
const COUNTER_BITS: u32 = 16;
const COUNTER_MASK: i64 = (1 << COUNTER_BITS) - 1;

const MAX_MILLIS: i64 = Hlc::MAX_MILLIS;

/// A hybrid-logical-clock timestamp.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Default)]
pub struct Hlc(pub i64);

impl Hlc {
    /// The largest wall-clock part a timestamp can hold (about the year
    /// 6429): the packed value stays a positive `i64`. Arithmetic on the
    /// clock saturates here instead of wrapping round to a negative value.
    pub const MAX_MILLIS: i64 = i64::MAX >> COUNTER_BITS;

    /// Build from wall milliseconds and a counter.
    pub fn new(millis: i64, counter: i64) -> Self {
        Hlc((millis.clamp(0, MAX_MILLIS) << COUNTER_BITS) | (counter & COUNTER_MASK))
    }

    /// Wall-clock part, milliseconds since the Unix epoch.
    pub fn millis(self) -> i64 {
        self.0 >> COUNTER_BITS
    }

    /// Logical counter part.
    pub fn counter(self) -> i64 {
        self.0 & COUNTER_MASK
    }

    /// The next local timestamp after `self`, given the wall clock now.
    /// Strictly greater than `self` whatever the wall clock says.
    pub fn tick(self, wall_millis: i64) -> Hlc {
        if wall_millis > self.millis() {
            Hlc::new(wall_millis, 0)
        } else if self.counter() < COUNTER_MASK {
            Hlc(self.0 + 1)
        } else {
            // Counter exhausted within one millisecond: borrow the next one
            // (at the end of the range it stays there: the change-set reader
            // refuses clocks anywhere near it, so a database never gets there).
            Hlc::new(self.millis().saturating_add(1), 0)
        }
    }

    /// Merge a timestamp received from another device: the result is greater
    /// than both `self` and `remote`.
    pub fn receive(self, remote: Hlc, wall_millis: i64) -> Hlc {
        self.max(remote).tick(wall_millis)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn tick_follows_the_wall_clock_when_it_moves_forward() {
        let t = Hlc::new(1_000, 5).tick(2_000);
        assert_eq!((t.millis(), t.counter()), (2_000, 0));
    }

    #[test]
    fn tick_never_goes_backwards_when_the_clock_does() {
        let t0 = Hlc::new(5_000, 0);
        let t1 = t0.tick(10); // clock set back to 1970
        let t2 = t1.tick(10);
        assert!(t0 < t1 && t1 < t2);
        assert_eq!(t2.millis(), 5_000);
    }

    /// Issue 16: a clock near the top of its range used to wrap negative
    /// ("CHECK constraint failed: hlc >= 0" on every later save).
    #[test]
    fn regression_16_the_clock_never_wraps_negative() {
        let top = Hlc::new(MAX_MILLIS, COUNTER_MASK);
        assert!(top.tick(0).0 >= 0);
        assert!(Hlc::new(i64::MAX, 0).0 >= 0);
        assert!(Hlc(0).receive(top, 0).0 >= 0);
        assert_eq!(Hlc::new(i64::MAX, 0).millis(), MAX_MILLIS);
    }

    #[test]
    fn counter_overflow_borrows_the_next_millisecond() {
        let t = Hlc::new(7, COUNTER_MASK).tick(7);
        assert_eq!((t.millis(), t.counter()), (8, 0));
    }

    #[test]
    fn receive_is_after_both_clocks() {
        let local = Hlc::new(100, 3);
        let remote = Hlc::new(900, 2);
        let t = local.receive(remote, 50);
        assert!(t > local && t > remote);
    }
}

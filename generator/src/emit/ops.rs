//! Operation counts of emitted code, printed in a comment above every function.
//!
//! Counted from what is emitted, not from the program it came from: a flattened sum
//! of `k` terms is `k − 1` additions, a unary minus that cannot be folded into a
//! literal is one addition, and loops (moment routines, kernel tables, Cholesky) are
//! counted at their worst-case trip counts.

use std::fmt;
use std::ops::{Add, AddAssign, Mul, Sub};

#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct Ops {
    /// Additions, subtractions and sign changes.
    pub add: usize,
    pub mul: usize,
    pub div: usize,
    pub sqrt: usize,
    /// `sin`/`cos` calls.
    pub trig: usize,
}

impl Add for Ops {
    type Output = Ops;
    fn add(self, o: Ops) -> Ops {
        Ops {
            add: self.add + o.add,
            mul: self.mul + o.mul,
            div: self.div + o.div,
            sqrt: self.sqrt + o.sqrt,
            trig: self.trig + o.trig,
        }
    }
}

/// Removes counts that `self` includes (a part replaced by another way of computing it).
impl Sub for Ops {
    type Output = Ops;
    fn sub(self, o: Ops) -> Ops {
        Ops {
            add: self.add - o.add,
            mul: self.mul - o.mul,
            div: self.div - o.div,
            sqrt: self.sqrt - o.sqrt,
            trig: self.trig - o.trig,
        }
    }
}

impl AddAssign for Ops {
    fn add_assign(&mut self, o: Ops) {
        *self = *self + o;
    }
}

impl Mul<usize> for Ops {
    type Output = Ops;
    fn mul(self, k: usize) -> Ops {
        Ops {
            add: self.add * k,
            mul: self.mul * k,
            div: self.div * k,
            sqrt: self.sqrt * k,
            trig: self.trig * k,
        }
    }
}

impl Ops {
    /// Every operation, of whatever kind.
    pub fn total(self) -> usize {
        self.add + self.mul + self.div + self.sqrt + self.trig
    }

    /// Component-wise maximum (worst branch).
    pub fn max(self, o: Ops) -> Ops {
        Ops {
            add: self.add.max(o.add),
            mul: self.mul.max(o.mul),
            div: self.div.max(o.div),
            sqrt: self.sqrt.max(o.sqrt),
            trig: self.trig.max(o.trig),
        }
    }
}

impl fmt::Display for Ops {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "{} add, {} mul, {} div, {} sqrt, {} trig",
            self.add, self.mul, self.div, self.sqrt, self.trig
        )
    }
}

//! A small seeded generator (xorshift64*, Vigna 2016), so large test data
//! need no crate and read the same on every platform.
#![allow(dead_code)] // each test file uses part of it

/// The generator's state; any non-zero seed.
pub struct Seeded(pub u64);

impl Seeded {
    /// A uniform value in [0, 1) from the top 53 bits.
    pub fn uniform(&mut self) -> f64 {
        self.0 ^= self.0 >> 12;
        self.0 ^= self.0 << 25;
        self.0 ^= self.0 >> 27;
        (self.0.wrapping_mul(0x2545_F491_4F6C_DD1D) >> 11) as f64 / (1u64 << 53) as f64
    }

    /// A standard normal value (Box–Muller, one of the pair).
    pub fn normal(&mut self) -> f64 {
        let (u, v) = (self.uniform().max(1e-300), self.uniform());
        (-2.0 * u.ln()).sqrt() * (std::f64::consts::TAU * v).cos()
    }
}

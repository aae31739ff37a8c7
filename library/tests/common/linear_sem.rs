//! Random linear-Gaussian structural models with hidden common causes,
//! simulated here independently of the library: five observed nodes
//! v0 … v4 (edges only from a lower to a higher index), one or two hidden
//! standard normal causes each feeding two observed nodes, a seeded
//! xorshift generator and Box–Muller normals. The true effect of one node
//! on another is the sum over directed paths of the products of edge
//! coefficients (Wright 1934, path tracing).

#![allow(dead_code)] // each test file uses part of the generator

use std::path::Path;

/// xorshift64*, seeded; uniforms in (0, 1) and Box–Muller normals.
pub struct Stream(u64);

impl Stream {
    pub fn new(seed: u64) -> Stream {
        Stream(seed.wrapping_mul(0x9E37_79B9_7F4A_7C15) | 1)
    }
    pub fn uniform(&mut self) -> f64 {
        self.0 ^= self.0 >> 12;
        self.0 ^= self.0 << 25;
        self.0 ^= self.0 >> 27;
        let bits = self.0.wrapping_mul(0x2545_F491_4F6C_DD1D) >> 11;
        (bits as f64 + 0.5) / (1u64 << 53) as f64
    }
    pub fn normal(&mut self) -> f64 {
        let (a, b) = (self.uniform(), self.uniform());
        (-2.0 * a.ln()).sqrt() * (2.0 * std::f64::consts::PI * b).cos()
    }
    pub fn below(&mut self, n: usize) -> usize {
        ((self.uniform() * n as f64) as usize).min(n - 1)
    }
}

pub const NODES: usize = 5;

/// A linear-Gaussian model: edge coefficients among observed nodes (i < j
/// in the order v0 … v4) and hidden causes, each with two observed children
/// and their loadings.
pub struct Sem {
    pub edges: Vec<(usize, usize, f64)>,
    pub hidden: Vec<[(usize, f64); 2]>,
}

impl Sem {
    pub fn random(s: &mut Stream) -> Sem {
        let coefficient = |s: &mut Stream| (0.5 + 0.5 * s.uniform()) * if s.uniform() < 0.5 { -1.0 } else { 1.0 };
        let mut edges = Vec::new();
        for j in 1..NODES {
            for i in 0..j {
                if s.uniform() < 0.45 {
                    edges.push((i, j, coefficient(s)));
                }
            }
        }
        let mut hidden = Vec::new();
        for _ in 0..1 + s.below(2) {
            let a = s.below(NODES);
            let b = (a + 1 + s.below(NODES - 1)) % NODES;
            hidden.push([(a, coefficient(s)), (b, coefficient(s))]);
        }
        Sem { edges, hidden }
    }

    pub fn graph_text(&self) -> String {
        let mut text = String::from("graph g:\n");
        for i in 0..NODES {
            text.push_str(&format!("    v{i}\n"));
        }
        for (i, j, _) in &self.edges {
            text.push_str(&format!("    v{i} -> v{j}\n"));
        }
        for (k, [(a, _), (b, _)]) in self.hidden.iter().enumerate() {
            text.push_str(&format!("    hidden u{k} -> v{a}, v{b}\n"));
        }
        text
    }

    /// Rows of the observed nodes, simulated in their order.
    pub fn rows(&self, s: &mut Stream, n: usize) -> Vec<[f64; NODES]> {
        (0..n)
            .map(|_| {
                let u: Vec<f64> = self.hidden.iter().map(|_| s.normal()).collect();
                let mut v = [0.0; NODES];
                for j in 0..NODES {
                    let mut value = s.normal();
                    for (i, _, b) in self.edges.iter().filter(|e| e.1 == j) {
                        value += b * v[*i];
                    }
                    for (k, pair) in self.hidden.iter().enumerate() {
                        value += pair.iter().filter(|(c, _)| *c == j).map(|(_, l)| l * u[k]).sum::<f64>();
                    }
                    v[j] = value;
                }
                v
            })
            .collect()
    }

    /// Wright's path tracing: the sum over directed paths from x to y of
    /// the products of their coefficients.
    pub fn total_effect(&self, x: usize, y: usize) -> f64 {
        let mut effect = [0.0; NODES];
        effect[x] = 1.0;
        for j in x + 1..NODES {
            effect[j] = self.edges.iter().filter(|e| e.1 == j).map(|(i, _, b)| effect[*i] * b).sum();
        }
        effect[y]
    }
}

pub fn write_csv(dir: &Path, name: &str, rows: &[[f64; NODES]]) {
    let mut text = (0..NODES).map(|i| format!("v{i}")).collect::<Vec<_>>().join(",") + "\n";
    for r in rows {
        text.push_str(&(r.iter().map(|v| format!("{v:.6}")).collect::<Vec<_>>().join(",") + "\n"));
    }
    std::fs::write(dir.join(name), text).unwrap();
}


//! Draws written out as CSV: columns `chain`, `draw` (both counted from 1)
//! and one column per parameter, one row per draw. Values are written in
//! the shortest form that reads back to the same number.

use std::io::Write;

use super::{Draws, DrawsError};

impl Draws {
    /// Write every draw as a CSV row to `w`.
    pub fn write_csv(&self, w: impl Write) -> Result<(), DrawsError> {
        let fail = |e: csv::Error| DrawsError::Write(e.to_string());
        let mut out = csv::Writer::from_writer(w);
        let mut header = vec!["chain".to_string(), "draw".to_string()];
        header.extend(self.names.iter().cloned());
        out.write_record(&header).map_err(fail)?;
        let mut row = Vec::with_capacity(header.len());
        for c in 0..self.chains {
            for d in 0..self.per_chain {
                row.clear();
                row.push((c + 1).to_string());
                row.push((d + 1).to_string());
                row.extend(self.values.iter().map(|v| v[c * self.per_chain + d].to_string()));
                out.write_record(&row).map_err(fail)?;
            }
        }
        out.flush().map_err(|e| DrawsError::Write(e.to_string()))
    }
}

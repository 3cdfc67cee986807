//! The loaded respondent table: item columns stacked over waves, NaN for missing values.
//! Central type: `Table`. Its byte encoding is the `load` artifact: deterministic (canonical
//! NaN, little-endian, fixed order) so the same inputs always hash the same. This table never
//! leaves the cache: reports and manifests receive aggregates only.

use serde::{Deserialize, Serialize};

const MAGIC: &[u8; 8] = b"CNSTBL1\n";
/// Values converted per write call when encoding.
const WRITE_CHUNK: usize = 8192;

#[derive(Debug, Clone, PartialEq)]
pub struct Table {
    pub items: Vec<String>,
    pub waves: Vec<String>,
    /// For each row, the index of its wave in `waves`.
    pub wave_of_row: Vec<u32>,
    /// One column per item, each `rows()` long; NaN marks a missing value.
    pub columns: Vec<Vec<f64>>,
}

#[derive(Serialize, Deserialize)]
struct Header {
    items: Vec<String>,
    waves: Vec<String>,
    rows: usize,
}

impl Table {
    pub fn rows(&self) -> usize {
        self.wave_of_row.len()
    }

    pub fn column(&self, item: &str) -> Option<&[f64]> {
        self.items.iter().position(|i| i == item).map(|k| self.columns[k].as_slice())
    }

    pub fn to_bytes(&self) -> Vec<u8> {
        let mut out = Vec::new();
        self.write_to(&mut out).unwrap_or_default();
        out
    }

    fn header(&self) -> Vec<u8> {
        serde_json::to_vec(&Header { items: self.items.clone(), waves: self.waves.clone(), rows: self.rows() })
            .unwrap_or_default()
    }

    /// Writes the `to_bytes` encoding piece by piece, so the table is never held twice.
    pub fn write_to(&self, out: &mut dyn std::io::Write) -> std::io::Result<()> {
        let header = self.header();
        out.write_all(MAGIC)?;
        out.write_all(&(header.len() as u64).to_le_bytes())?;
        out.write_all(&header)?;
        let mut buffer = Vec::with_capacity(8 * WRITE_CHUNK);
        for rows in self.wave_of_row.chunks(WRITE_CHUNK) {
            buffer.clear();
            rows.iter().for_each(|w| buffer.extend_from_slice(&w.to_le_bytes()));
            out.write_all(&buffer)?;
        }
        for col in &self.columns {
            for values in col.chunks(WRITE_CHUNK) {
                buffer.clear();
                for &v in values {
                    // One NaN bit pattern, so equal tables always hash equal.
                    let v = if v.is_nan() { f64::NAN } else { v };
                    buffer.extend_from_slice(&v.to_le_bytes());
                }
                out.write_all(&buffer)?;
            }
        }
        Ok(())
    }

    /// Decodes `to_bytes` output; `None` for anything malformed (the cache then recomputes).
    pub fn from_bytes(bytes: &[u8]) -> Option<Table> {
        let rest = bytes.strip_prefix(MAGIC)?;
        let (len, rest) = rest.split_first_chunk::<8>()?;
        let len = usize::try_from(u64::from_le_bytes(*len)).ok()?;
        let header: Header = serde_json::from_slice(rest.get(..len)?).ok()?;
        let mut rest = rest.get(len..)?;
        let expected = header.rows.checked_mul(4 + 8 * header.items.len())?;
        if rest.len() != expected {
            return None;
        }
        let mut wave_of_row = Vec::with_capacity(header.rows);
        for _ in 0..header.rows {
            let (w, r) = rest.split_first_chunk::<4>()?;
            wave_of_row.push(u32::from_le_bytes(*w));
            rest = r;
        }
        let columns = rest
            .chunks_exact(8 * header.rows.max(1))
            .take(header.items.len())
            .map(|chunk| chunk.chunks_exact(8).map(|b| f64::from_le_bytes(b.try_into().unwrap_or([0; 8]))).collect())
            .collect::<Vec<Vec<f64>>>();
        let columns = if header.rows == 0 { vec![Vec::new(); header.items.len()] } else { columns };
        Some(Table { items: header.items, waves: header.waves, wave_of_row, columns })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bytes_round_trip_and_are_deterministic() {
        let t = Table {
            items: vec!["a".into(), "b".into()],
            waves: vec!["w1".into()],
            wave_of_row: vec![0, 0, 0],
            columns: vec![vec![1.0, f64::NAN, 3.0], vec![-0.5, 2.0, f64::NAN]],
        };
        let bytes = t.to_bytes();
        assert_eq!(bytes, t.clone().to_bytes());
        let back = Table::from_bytes(&bytes).unwrap();
        assert_eq!(back.items, t.items);
        assert_eq!(back.columns[0][0], 1.0);
        assert!(back.columns[0][1].is_nan());
        assert!(Table::from_bytes(&bytes[..bytes.len() - 1]).is_none());
    }
}

//! The loaded respondent table: item columns stacked over waves, each stored compactly.
//! Central types: `Table` and `Column`. An item with at most `MAX_CODED_LEVELS` distinct values
//! (every Likert item) is held as one byte per answer plus its sorted levels; any other item as
//! `f64` values with NaN for missing. Consumers that need numbers take one column at a time
//! (`Column::values`, `Column::get`), so no second full copy of the table is ever built.
//! The byte encoding is the `load` artifact: deterministic (canonical NaN, little-endian, fixed
//! order) so the same inputs always hash the same. This table never leaves the cache: reports
//! and manifests receive aggregates only.

use std::borrow::Cow;

use serde::{Deserialize, Serialize};

const MAGIC: &[u8; 8] = b"CNSTBL2\n";
/// Values converted per write call when encoding.
const WRITE_CHUNK: usize = 8192;

/// The code that marks a missing answer in a coded column.
pub const MISSING: u8 = u8::MAX;
/// Most distinct values a coded column holds (codes 0..=253; 254 unused, 255 missing). The
/// CSV reader switches an item to `f64` values the first time it exceeds this.
pub const MAX_CODED_LEVELS: usize = 254;

/// One item's answers over all rows.
#[derive(Debug, Clone, PartialEq)]
pub enum Column {
    /// One value per row; NaN marks a missing value.
    Values(Vec<f64>),
    /// `levels` are sorted (`f64::total_cmp`), distinct, finite, with no -0.0, at most
    /// `MAX_CODED_LEVELS` of them (not every level need occur, e.g. in a bootstrap sample);
    /// row r holds `levels[codes[r]]`, or nothing when `codes[r] == MISSING`.
    Codes { levels: Vec<f64>, codes: Vec<u8> },
}

impl Column {
    pub fn len(&self) -> usize {
        match self {
            Column::Values(v) => v.len(),
            Column::Codes { codes, .. } => codes.len(),
        }
    }

    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Row `r`'s value, NaN when missing.
    pub fn get(&self, r: usize) -> f64 {
        match self {
            Column::Values(v) => v[r],
            Column::Codes { levels, codes } => level(levels, codes[r]),
        }
    }

    pub fn is_missing(&self, r: usize) -> bool {
        match self {
            Column::Values(v) => v[r].is_nan(),
            Column::Codes { codes, .. } => codes[r] == MISSING,
        }
    }

    /// The column as numbers (NaN = missing): borrowed when stored as values, built (one
    /// column, 8 bytes a row) when coded.
    pub fn values(&self) -> Cow<'_, [f64]> {
        match self {
            Column::Values(v) => Cow::Borrowed(v),
            Column::Codes { levels, codes } => Cow::Owned(codes.iter().map(|&c| level(levels, c)).collect()),
        }
    }

    /// The column as owned numbers (NaN = missing).
    pub fn into_values(self) -> Vec<f64> {
        match self {
            Column::Values(v) => v,
            c @ Column::Codes { .. } => c.values().into_owned(),
        }
    }

    /// The rows `rows` (with repeats) in order, in the same form: a coded column keeps its
    /// levels and resamples its codes.
    pub fn pick(&self, rows: &[usize]) -> Column {
        match self {
            Column::Values(v) => Column::Values(rows.iter().map(|&r| v[r]).collect()),
            Column::Codes { levels, codes } => {
                Column::Codes { levels: levels.clone(), codes: rows.iter().map(|&r| codes[r]).collect() }
            }
        }
    }

    /// `f` applied to every present value (NaN from `f` makes a value missing). For a coded
    /// column `f` runs once per level, not per row; the levels are then sorted and merged again.
    /// Errors from `f` carry the first row (0-based) holding the offending value.
    pub fn map_values<E>(&mut self, f: impl Fn(f64) -> Result<f64, E>) -> Result<(), (usize, E)> {
        match self {
            Column::Values(v) => {
                for (row, x) in v.iter_mut().enumerate() {
                    if !x.is_nan() {
                        *x = f(*x).map_err(|e| (row, e))?;
                    }
                }
                Ok(())
            }
            Column::Codes { levels, codes } => {
                let mut mapped: Vec<Result<f64, E>> = levels.iter().map(|&l| f(l)).collect();
                if mapped.iter().any(Result::is_err) {
                    // A failing level no row holds (possible after resampling) is dropped.
                    let first = codes.iter().position(|&c| c != MISSING && mapped[c as usize].is_err());
                    if let Some(row) = first
                        && let Err(e) = mapped.swap_remove(codes[row] as usize)
                    {
                        return Err((row, e));
                    }
                }
                let mapped: Vec<f64> = mapped.into_iter().map(|r| r.unwrap_or(f64::NAN)).collect();
                let (new_levels, remap) = canonical_levels(&mapped);
                codes.iter_mut().for_each(|c| *c = if *c == MISSING { MISSING } else { remap[*c as usize] });
                *levels = new_levels;
                Ok(())
            }
        }
    }

    /// Appends `other`'s rows; two coded columns stay coded while their levels together fit.
    pub fn append(&mut self, other: Column) {
        if self.is_empty() {
            *self = other;
            return;
        }
        let merged = match (&mut *self, other) {
            (Column::Values(v), other) => {
                match other {
                    Column::Values(w) => v.extend(w),
                    Column::Codes { levels, codes } => v.extend(codes.iter().map(|&c| level(&levels, c))),
                }
                return;
            }
            (Column::Codes { levels, codes }, Column::Codes { levels: more, codes: mine }) => {
                let mut all = levels.clone();
                all.extend_from_slice(&more);
                let (union, remap) = canonical_levels(&all);
                if union.len() <= MAX_CODED_LEVELS {
                    let (first, second) = remap.split_at(levels.len());
                    codes.iter_mut().for_each(|c| *c = if *c == MISSING { MISSING } else { first[*c as usize] });
                    codes.extend(mine.iter().map(|&c| if c == MISSING { MISSING } else { second[c as usize] }));
                    *levels = union;
                    return;
                }
                let mut v = std::mem::replace(self, Column::Values(Vec::new())).into_values();
                v.extend(mine.iter().map(|&c| level(&more, c)));
                v
            }
            (Column::Codes { .. }, Column::Values(w)) => {
                let mut v = std::mem::replace(self, Column::Values(Vec::new())).into_values();
                v.extend(w);
                v
            }
        };
        *self = Column::Values(merged);
    }
}

fn level(levels: &[f64], code: u8) -> f64 {
    if code == MISSING { f64::NAN } else { levels[code as usize] }
}

/// Sorted distinct levels of `values` (NaN dropped, -0.0 as 0.0) and, for each input position,
/// its code among them (`MISSING` for NaN).
pub fn canonical_levels(values: &[f64]) -> (Vec<f64>, Vec<u8>) {
    let mut sorted: Vec<f64> = values.iter().filter(|v| !v.is_nan()).map(|v| v + 0.0).collect();
    sorted.sort_unstable_by(f64::total_cmp);
    sorted.dedup();
    let remap = values
        .iter()
        .map(|v| {
            if v.is_nan() {
                MISSING
            } else {
                let v = v + 0.0;
                sorted.binary_search_by(|x| x.total_cmp(&v)).map_or(MISSING, |k| u8::try_from(k).unwrap_or(MISSING))
            }
        })
        .collect();
    (sorted, remap)
}

/// `values` in compact form: coded when they have at most `MAX_CODED_LEVELS` distinct values.
pub fn compact(values: Vec<f64>) -> Column {
    let mut b = ColumnBuilder::new();
    for &v in &values {
        b.push(v);
        if b.values.is_some() {
            return Column::Values(values);
        }
    }
    b.finish()
}

/// Builds one column row by row: coded while the item has at most `MAX_CODED_LEVELS`
/// distinct values, switched to `f64` values (once, for good) the first time it has more.
#[derive(Debug, Default)]
pub struct ColumnBuilder {
    /// Levels in order of first appearance (code = position).
    levels: Vec<f64>,
    /// (level, code) sorted by level, for lookup.
    index: Vec<(f64, u8)>,
    codes: Vec<u8>,
    /// `Some` once the column has switched to values.
    values: Option<Vec<f64>>,
}

impl ColumnBuilder {
    pub fn new() -> ColumnBuilder {
        ColumnBuilder::default()
    }

    /// Adds the next row's value (NaN = missing).
    pub fn push(&mut self, v: f64) {
        if let Some(values) = &mut self.values {
            values.push(v);
            return;
        }
        if v.is_nan() {
            self.codes.push(MISSING);
            return;
        }
        let key = v + 0.0;
        match self.index.binary_search_by(|(x, _)| x.total_cmp(&key)) {
            Ok(k) => self.codes.push(self.index[k].1),
            Err(at) if self.levels.len() < MAX_CODED_LEVELS => {
                let code = self.levels.len() as u8;
                self.levels.push(key);
                self.index.insert(at, (key, code));
                self.codes.push(code);
            }
            Err(_) => {
                let mut values: Vec<f64> = Vec::with_capacity(self.codes.capacity().max(self.codes.len() + 1));
                values.extend(self.codes.iter().map(|&c| level(&self.levels, c)));
                values.push(v);
                self.codes = Vec::new();
                self.index = Vec::new();
                self.values = Some(values);
            }
        }
    }

    pub fn len(&self) -> usize {
        self.values.as_ref().map_or(self.codes.len(), Vec::len)
    }

    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// The finished column; coded levels come out sorted.
    pub fn finish(self) -> Column {
        if let Some(mut values) = self.values {
            values.shrink_to_fit();
            return Column::Values(values);
        }
        let (levels, remap) = canonical_levels(&self.levels);
        let mut codes = self.codes;
        codes.iter_mut().for_each(|c| *c = if *c == MISSING { MISSING } else { remap[*c as usize] });
        codes.shrink_to_fit();
        Column::Codes { levels, codes }
    }
}

#[derive(Debug, Clone, PartialEq)]
pub struct Table {
    pub items: Vec<String>,
    pub waves: Vec<String>,
    /// For each row, the index of its wave in `waves`.
    pub wave_of_row: Vec<u32>,
    /// One column per item, each `rows()` long.
    pub columns: Vec<Column>,
}

#[derive(Serialize, Deserialize)]
struct Header {
    items: Vec<String>,
    waves: Vec<String>,
    rows: usize,
}

/// Column tags in the encoding.
const TAG_VALUES: u8 = 0;
const TAG_CODES: u8 = 1;

impl Table {
    /// The rows where every one of `items` has a value, as an n x p matrix (what the
    /// distribution-free tetrad test reads). Filled column by column (nalgebra is
    /// column-major), each item read in its own form.
    pub fn complete_rows(&self, items: &[usize]) -> nalgebra::DMatrix<f64> {
        let rows: Vec<usize> =
            (0..self.rows()).filter(|&r| items.iter().all(|&k| !self.columns[k].is_missing(r))).collect();
        let mut m = nalgebra::DMatrix::zeros(rows.len(), items.len());
        for (c, &k) in items.iter().enumerate() {
            let col = &self.columns[k];
            m.column_mut(c).iter_mut().zip(&rows).for_each(|(x, &r)| *x = col.get(r));
        }
        m
    }

    pub fn rows(&self) -> usize {
        self.wave_of_row.len()
    }

    pub fn column(&self, item: &str) -> Option<&Column> {
        self.items.iter().position(|i| i == item).map(|k| &self.columns[k])
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

    /// Writes the `to_bytes` encoding piece by piece, so the table is never held twice:
    /// `MAGIC || u64 header length || JSON header || u32 wave per row || columns`, each column
    /// `0 || f64 per row` (values) or `1 || u8 level count || f64 per level || u8 code per row`.
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
            match col {
                Column::Values(values) => {
                    out.write_all(&[TAG_VALUES])?;
                    for values in values.chunks(WRITE_CHUNK) {
                        buffer.clear();
                        for &v in values {
                            // One NaN bit pattern, so equal tables always hash equal.
                            let v = if v.is_nan() { f64::NAN } else { v };
                            buffer.extend_from_slice(&v.to_le_bytes());
                        }
                        out.write_all(&buffer)?;
                    }
                }
                Column::Codes { levels, codes } => {
                    out.write_all(&[TAG_CODES, levels.len() as u8])?;
                    buffer.clear();
                    levels.iter().for_each(|l| buffer.extend_from_slice(&l.to_le_bytes()));
                    out.write_all(&buffer)?;
                    out.write_all(codes)?;
                }
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
        let rows = header.rows;
        let mut rest = rest.get(len..)?;
        let waves = rest.get(..rows.checked_mul(4)?)?;
        let wave_of_row: Vec<u32> =
            waves.chunks_exact(4).map(|b| u32::from_le_bytes(b.try_into().unwrap_or([0; 4]))).collect();
        if wave_of_row.iter().any(|&w| w as usize >= header.waves.len()) {
            return None;
        }
        rest = &rest[rows * 4..];
        let mut columns = Vec::with_capacity(header.items.len().min(rest.len()));
        for _ in 0..header.items.len() {
            let (&tag, r) = rest.split_first()?;
            rest = r;
            match tag {
                TAG_VALUES => {
                    let bytes = rest.get(..rows.checked_mul(8)?)?;
                    columns.push(Column::Values(
                        bytes.chunks_exact(8).map(|b| f64::from_le_bytes(b.try_into().unwrap_or([0; 8]))).collect(),
                    ));
                    rest = &rest[bytes.len()..];
                }
                TAG_CODES => {
                    let (&k, r) = rest.split_first()?;
                    let k = k as usize;
                    let levels: Vec<f64> = r
                        .get(..k * 8)?
                        .chunks_exact(8)
                        .map(|b| f64::from_le_bytes(b.try_into().unwrap_or([0; 8])))
                        .collect();
                    let sorted = levels.windows(2).all(|w| w[0].total_cmp(&w[1]).is_lt());
                    if k > MAX_CODED_LEVELS || !sorted || levels.iter().any(|l| !l.is_finite()) {
                        return None;
                    }
                    let codes = r.get(k * 8..k * 8 + rows)?;
                    if codes.iter().any(|&c| c != MISSING && c as usize >= k) {
                        return None;
                    }
                    columns.push(Column::Codes { levels, codes: codes.to_vec() });
                    rest = &r[k * 8 + rows..];
                }
                _ => return None,
            }
        }
        if !rest.is_empty() {
            return None;
        }
        Some(Table { items: header.items, waves: header.waves, wave_of_row, columns })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn built(values: &[f64]) -> Column {
        let mut b = ColumnBuilder::new();
        values.iter().for_each(|&v| b.push(v));
        assert_eq!(b.len(), values.len());
        b.finish()
    }

    fn same(a: &[f64], b: &[f64]) -> bool {
        a.len() == b.len() && a.iter().zip(b).all(|(x, y)| x == y || (x.is_nan() && y.is_nan()))
    }

    #[test]
    fn bytes_round_trip_and_are_deterministic() {
        let t = Table {
            items: vec!["a".into(), "b".into(), "c".into()],
            waves: vec!["w1".into(), "w2".into()],
            wave_of_row: vec![0, 0, 1],
            columns: vec![
                Column::Values(vec![1.0, f64::NAN, 3.0]),
                built(&[-0.5, 2.0, f64::NAN]),
                Column::Codes { levels: vec![1.0, 2.0, 5.0], codes: vec![2, MISSING, 0] },
            ],
        };
        let bytes = t.to_bytes();
        assert_eq!(bytes, t.clone().to_bytes());
        let back = Table::from_bytes(&bytes).unwrap();
        assert_eq!(back.items, t.items);
        assert_eq!(back.wave_of_row, t.wave_of_row);
        assert_eq!(back.columns[1], t.columns[1]);
        assert_eq!(back.columns[2], t.columns[2]);
        assert_eq!(back.columns[0].get(0), 1.0);
        assert!(back.columns[0].is_missing(1));
        assert!(matches!(back.columns[1], Column::Codes { .. }));
        assert!(Table::from_bytes(&bytes[..bytes.len() - 1]).is_none());
        let mut longer = bytes.clone();
        longer.push(0);
        assert!(Table::from_bytes(&longer).is_none());
        // A code beyond its levels is refused, never indexed.
        let mut bad = bytes.clone();
        let last = bad.len() - 1;
        bad[last] = 7;
        assert!(Table::from_bytes(&bad).is_none());
        let empty =
            Table { items: vec!["a".into()], waves: vec!["w".into()], wave_of_row: vec![], columns: vec![built(&[])] };
        assert_eq!(Table::from_bytes(&empty.to_bytes()).unwrap(), empty);
    }

    #[test]
    fn builder_codes_few_levels_sorted_with_missing() {
        let input = [3.0, f64::NAN, 1.0, -0.0, 3.0, 0.0, f64::NAN, 2.5];
        let col = built(&input);
        let Column::Codes { levels, codes } = &col else { panic!("{col:?}") };
        assert_eq!(levels, &[0.0, 1.0, 2.5, 3.0]);
        assert!(levels[0].is_sign_positive());
        assert_eq!(codes, &[3, MISSING, 1, 0, 3, 0, MISSING, 2]);
        assert!(same(&col.values(), &[3.0, f64::NAN, 1.0, 0.0, 3.0, 0.0, f64::NAN, 2.5]));
        let all_missing = built(&[f64::NAN, f64::NAN]);
        assert_eq!(all_missing, Column::Codes { levels: vec![], codes: vec![MISSING, MISSING] });
    }

    #[test]
    fn builder_switches_to_values_past_254_levels_mid_file() {
        // 254 distinct values (with missing ones between) stay coded.
        let mut input: Vec<f64> = (0..254).map(|i| f64::from(253 - i) / 4.0).collect();
        input.insert(10, f64::NAN);
        input.extend([0.25, f64::NAN, 63.25]);
        let col = built(&input);
        let Column::Codes { levels, .. } = &col else { panic!("254 levels should stay coded") };
        assert_eq!(levels.len(), MAX_CODED_LEVELS);
        assert!(same(&col.values(), &input));
        // The 255th distinct value switches the column; earlier and later rows keep their values.
        let mut more = input.clone();
        more.push(1000.5);
        more.extend([f64::NAN, 2.0, 7.125]);
        let col = built(&more);
        let Column::Values(v) = &col else { panic!("255 levels should be values") };
        assert!(same(v, &more));
    }

    #[test]
    fn mapping_levels_matches_mapping_values() {
        let input = [1.0, 5.0, f64::NAN, 3.0, 9.0, 1.0, 2.0];
        let f = |v: f64| -> Result<f64, f64> {
            if v == 9.0 {
                Ok(f64::NAN)
            } else if v > 5.0 {
                Err(v)
            } else {
                Ok(1.0 + 5.0 - v)
            }
        };
        let mut coded = built(&input);
        let mut plain = Column::Values(input.to_vec());
        coded.map_values(f).unwrap();
        plain.map_values(f).unwrap();
        assert!(same(&coded.values(), &plain.values()));
        let Column::Codes { levels, .. } = &coded else { panic!() };
        assert_eq!(levels, &[1.0, 3.0, 4.0, 5.0]);
        // The first row holding a failing level is named, as for values.
        let input = [1.0, 7.0, 2.0, 6.0];
        let mut coded = built(&input);
        let mut plain = Column::Values(input.to_vec());
        assert_eq!(coded.map_values(f).unwrap_err(), (1, 7.0));
        assert_eq!(plain.map_values(f).unwrap_err(), (1, 7.0));
    }

    #[test]
    fn appending_merges_levels_or_falls_back_to_values() {
        let mut a = built(&[1.0, 3.0, f64::NAN]);
        a.append(built(&[2.0, 3.0]));
        assert_eq!(a, Column::Codes { levels: vec![1.0, 2.0, 3.0], codes: vec![0, 2, MISSING, 1, 2] });
        let first: Vec<f64> = (0..200).map(f64::from).collect();
        let second: Vec<f64> = (150..300).map(f64::from).collect();
        let mut a = built(&first);
        a.append(built(&second));
        let mut both = first.clone();
        both.extend(&second);
        assert_eq!(a, Column::Values(both));
        let mut a = built(&[1.0]);
        a.append(Column::Values(vec![0.5]));
        assert_eq!(a, Column::Values(vec![1.0, 0.5]));
    }
}

//! Parquet output: a small column builder with explicit types, and an atomic write (to a
//! temporary name in the same folder, then renamed) so an interrupted run never leaves a
//! half-written table that looks whole.

use crate::error::{Error, Result};
use chrono::NaiveDate;
use polars::prelude::*;
use std::path::Path;

/// Days from 0001-01-01 (chrono's CE day 1) to 1970-01-01, polars' date epoch.
const EPOCH_CE_DAYS: i32 = 719_163;

/// Builds a DataFrame column by column with the types fixed by the caller.
#[derive(Default)]
pub struct TableBuilder {
    columns: Vec<Column>,
}

impl TableBuilder {
    pub fn new() -> TableBuilder {
        TableBuilder::default()
    }

    pub fn dates(mut self, name: &str, values: impl IntoIterator<Item = Option<NaiveDate>>) -> Self {
        use chrono::Datelike;
        let days: Int32Chunked = values.into_iter().map(|d| d.map(|d| d.num_days_from_ce() - EPOCH_CE_DAYS)).collect();
        let s = days.with_name(name.into()).into_series().into_date();
        self.columns.push(s.into_column());
        self
    }

    pub fn strings<S: AsRef<str>>(mut self, name: &str, values: impl IntoIterator<Item = Option<S>>) -> Self {
        let ca: StringChunked = values.into_iter().collect();
        self.columns.push(ca.with_name(name.into()).into_column());
        self
    }

    pub fn floats(mut self, name: &str, values: impl IntoIterator<Item = Option<f64>>) -> Self {
        let ca: Float64Chunked = values.into_iter().collect();
        self.columns.push(ca.with_name(name.into()).into_column());
        self
    }

    pub fn ints(mut self, name: &str, values: impl IntoIterator<Item = Option<i64>>) -> Self {
        let ca: Int64Chunked = values.into_iter().collect();
        self.columns.push(ca.with_name(name.into()).into_column());
        self
    }

    pub fn bools(mut self, name: &str, values: impl IntoIterator<Item = Option<bool>>) -> Self {
        let ca: BooleanChunked = values.into_iter().collect();
        self.columns.push(ca.with_name(name.into()).into_column());
        self
    }

    pub fn finish(self) -> Result<DataFrame> {
        DataFrame::new_infer_height(self.columns).map_err(|e| Error::Other(format!("building a table: {e}")))
    }
}

/// Rows per Parquet row group when a whole frame is written at once (polars' default).
pub const ROW_GROUP_ROWS: usize = 512 * 512;

/// The row ranges of the row groups that a one-shot write of a single-chunk frame of `height`
/// rows produces: `height / ROW_GROUP_ROWS` groups (at least one) of `height / groups` rows,
/// the last taking the remainder (polars-core 0.55.2, `chunk_df_for_writing` and
/// `split_and_flatten`; the unit test below holds it to polars' own output). [`write_parquet_in_groups`] writes the same groups one at a
/// time, so a large table never exists whole as a frame and the file has the same bytes.
pub fn row_groups(height: usize) -> Vec<std::ops::Range<usize>> {
    let n = (height / ROW_GROUP_ROWS).max(1);
    let size = height / n;
    (0..n).map(|i| i * size..if i + 1 == n { height } else { (i + 1) * size }).collect()
}

fn writer<W: std::io::Write>(file: W, metadata: &[(String, String)]) -> ParquetWriter<W> {
    ParquetWriter::new(file)
        .with_compression(ParquetCompression::Zstd(None))
        .with_key_value_metadata(Some(KeyValueMetadata::from_static(metadata.to_vec())))
        .set_parallel(false)
}

/// Writes to a temporary name in `path`'s folder with `write`, then renames it to `path`.
fn atomically(path: &Path, write: impl FnOnce(std::fs::File) -> Result<()>) -> Result<()> {
    let dir = path.parent().unwrap_or(Path::new("."));
    std::fs::create_dir_all(dir).map_err(|e| Error::Write { path: dir.to_path_buf(), message: e.to_string() })?;
    let file_name = path.file_name().and_then(|n| n.to_str()).unwrap_or("table.parquet");
    let tmp = dir.join(format!(".{file_name}.{}.tmp", std::process::id()));
    let file = std::fs::File::create(&tmp).map_err(|e| Error::Write { path: tmp.clone(), message: e.to_string() })?;
    if let Err(e) = write(file) {
        let _ = std::fs::remove_file(&tmp);
        return Err(e);
    }
    std::fs::rename(&tmp, path).map_err(|e| Error::Write { path: path.to_path_buf(), message: e.to_string() })
}

/// Writes `df` to `path` atomically, with file-level key-value metadata (units, settings).
pub fn write_parquet(df: &mut DataFrame, path: &Path, metadata: &[(String, String)]) -> Result<()> {
    let failed = |e: PolarsError| Error::Write { path: path.to_path_buf(), message: e.to_string() };
    atomically(path, |file| writer(file, metadata).finish(df).map(|_| ()).map_err(failed))
}

/// Writes a table of `height` rows to `path` atomically, one row group at a time: `group`
/// builds the frame of the rows in a range (see [`row_groups`]). Peak memory is one group's
/// frame instead of the whole table's, and the bytes are those of [`write_parquet`] on the
/// whole frame.
pub fn write_parquet_in_groups(path: &Path, metadata: &[(String, String)], height: usize, mut group: impl FnMut(std::ops::Range<usize>) -> Result<DataFrame>) -> Result<()> {
    let failed = |e: PolarsError| Error::Write { path: path.to_path_buf(), message: e.to_string() };
    atomically(path, |file| {
        let mut frame = |range| -> Result<DataFrame> {
            let mut df = group(range)?;
            df.rechunk_mut();
            Ok(df)
        };
        // `row_groups` always gives at least one range; the first frame gives the schema.
        let mut ranges = row_groups(height).into_iter();
        let first = frame(ranges.next().unwrap_or(0..0))?;
        let mut w = writer(file, metadata).batched(first.schema()).map_err(failed)?;
        w.write_batch(&first).map_err(failed)?;
        drop(first);
        for range in ranges {
            w.write_batch(&frame(range)?).map_err(failed)?;
        }
        w.finish().map(|_| ()).map_err(failed)
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn frame(rows: std::ops::Range<usize>) -> Result<DataFrame> {
        let label = |i: usize| format!("Entity number {}", i % 37);
        TableBuilder::new()
            .ints("row", rows.clone().map(|i| Some(i as i64)))
            .strings("entity", rows.clone().map(|i| Some(label(i))))
            .floats("value", rows.clone().map(|i| (i % 11 != 0).then(|| (i as f64).sqrt())))
            .finish()
    }

    #[test]
    fn row_groups_cover_every_row_once() {
        assert_eq!(row_groups(0), vec![0..0]);
        assert_eq!(row_groups(10), vec![0..10]);
        assert_eq!(row_groups(2 * ROW_GROUP_ROWS - 1), vec![0..2 * ROW_GROUP_ROWS - 1]);
        assert_eq!(row_groups(2 * ROW_GROUP_ROWS + 3), vec![0..ROW_GROUP_ROWS + 1, ROW_GROUP_ROWS + 1..2 * ROW_GROUP_ROWS + 3]);
    }

    #[test]
    fn writing_in_groups_gives_the_bytes_of_one_write() {
        // Heights below one group, of exactly one, of one and a half (still one group), and of
        // three groups with a remainder; empty.
        let dir = tempfile::tempdir().unwrap();
        let meta = vec![("hazardline.test".to_string(), "x".to_string())];
        for height in [0, 5, ROW_GROUP_ROWS, ROW_GROUP_ROWS * 3 / 2, 3 * ROW_GROUP_ROWS + 7] {
            let (a, b) = (dir.path().join(format!("one-{height}.parquet")), dir.path().join(format!("groups-{height}.parquet")));
            write_parquet(&mut frame(0..height).unwrap(), &a, &meta).unwrap();
            write_parquet_in_groups(&b, &meta, height, frame).unwrap();
            assert!(std::fs::read(&a).unwrap() == std::fs::read(&b).unwrap(), "height {height}: the files differ");
        }
    }
}

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

    /// A string column. A value longer than a view holds inline (12 bytes) that equals the last
    /// such value stored (a curve's entity, tier and clause on each of its rows) points its
    /// view at those bytes instead of copying them again: the same values, so the same Parquet
    /// bytes, in less memory. Only the last long value is remembered: one that comes back after
    /// another is stored again.
    pub fn strings<S: AsRef<str>>(mut self, name: &str, values: impl IntoIterator<Item = Option<S>>) -> Self {
        use polars_arrow::array::{MutableBinaryViewArray, View};
        let values = values.into_iter();
        let mut b = MutableBinaryViewArray::<str>::with_capacity(values.size_hint().0);
        let mut last: Option<(S, View)> = None;
        // Bytes of the views pushed as copies, added to the array's total once at the end.
        let mut shared_bytes = 0usize;
        for v in values {
            let Some(s) = v else {
                b.push_null();
                continue;
            };
            let text = s.as_ref();
            if text.len() <= View::MAX_INLINE_SIZE as usize {
                b.push_value(text);
                continue;
            }
            if let Some((_, view)) = last.as_ref().filter(|(prev, _)| prev.as_ref() == text) {
                // SAFETY: the view was made by this builder for these very bytes, and its buffer
                // index stays valid (a buffer, once started, keeps its index); the validity, when
                // there is one, gets its bit here, and the byte total is set below.
                unsafe { b.views_mut().push(*view) };
                if let Some(validity) = b.validity() {
                    validity.push(true);
                }
                shared_bytes += text.len();
                continue;
            }
            b.push_value(text);
            let view = *b.views().last().expect("a value was just pushed");
            last = Some((s, view));
        }
        if shared_bytes > 0 {
            // SAFETY: the total is the sum of the views' lengths, the shared views' included.
            unsafe { b.set_total_bytes_len(b.total_bytes_len() + shared_bytes) };
        }
        let ca = StringChunked::with_chunk(name.into(), b.freeze());
        self.columns.push(ca.into_column());
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
        DataFrame::new_infer_height(self.columns)
            .map_err(|e| Error::Encode { what: "building a table", message: e.to_string() })
    }
}

/// Rows per Parquet row group of the tables written as their rows arrive ([`RowGroupWriter`]).
pub const ROW_GROUP_ROWS: usize = 512 * 512;

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

/// Rows a [`RowGroupWriter`] frames at a time: a piece of rows small enough to stay in the
/// core's cache while each of its columns is built (a few hundred kB of rows). Divides
/// [`ROW_GROUP_ROWS`].
const PIECE_ROWS: usize = 4096;

/// A table written as its rows arrive: rows are written in row groups of exactly
/// [`ROW_GROUP_ROWS`] rows (the last group takes the rest), so the file's bytes depend on its
/// rows alone, never on how they were handed over. The rows are framed in pieces of
/// [`PIECE_ROWS`] as they come (each piece's columns built while its rows are in the cache,
/// the rows then dropped), the pieces of a group gathered and made one chunk when the group is
/// written: the same values, so the same bytes as framing the group's rows at once. At most one
/// piece of rows and one group's columns are in memory. Written under a temporary name in the
/// target's folder and renamed by [`RowGroupWriter::finish`]; dropped unfinished, the temporary
/// file is removed.
pub struct RowGroupWriter<T> {
    path: std::path::PathBuf,
    tmp: std::path::PathBuf,
    writer: Option<polars::io::parquet::write::BatchedWriter<std::fs::File>>,
    frame: fn(&[T]) -> Result<DataFrame>,
    /// Rows not yet framed (fewer than a piece).
    pending: Vec<T>,
    /// The current group's framed pieces, and their number of rows.
    group: Option<DataFrame>,
    group_rows: usize,
    written: usize,
}

impl<T> RowGroupWriter<T> {
    /// Starts the file at `path`; `frame` builds the frame of a run of rows (its schema is
    /// taken from the frame of no rows).
    pub fn create(path: &Path, metadata: &[(String, String)], frame: fn(&[T]) -> Result<DataFrame>) -> Result<Self> {
        let dir = path.parent().unwrap_or(Path::new("."));
        std::fs::create_dir_all(dir).map_err(|e| Error::Write { path: dir.to_path_buf(), message: e.to_string() })?;
        let file_name = path.file_name().and_then(|n| n.to_str()).unwrap_or("table.parquet");
        let tmp = dir.join(format!(".{file_name}.{}.tmp", std::process::id()));
        let file =
            std::fs::File::create(&tmp).map_err(|e| Error::Write { path: tmp.clone(), message: e.to_string() })?;
        let schema = frame(&[])?.schema().clone();
        let failed = |e: PolarsError| Error::Write { path: path.to_path_buf(), message: e.to_string() };
        let writer = match writer(file, metadata).batched(&schema) {
            Ok(w) => w,
            Err(e) => {
                let _ = std::fs::remove_file(&tmp);
                return Err(failed(e));
            }
        };
        Ok(RowGroupWriter {
            path: path.to_path_buf(),
            tmp,
            writer: Some(writer),
            frame,
            pending: Vec::with_capacity(PIECE_ROWS),
            group: None,
            group_rows: 0,
            written: 0,
        })
    }

    /// Adds rows at the end of the table.
    pub fn push(&mut self, rows: impl IntoIterator<Item = T>) -> Result<()> {
        for r in rows {
            self.pending.push(r);
            if self.pending.len() == PIECE_ROWS {
                self.frame_pending()?;
                if self.group_rows == ROW_GROUP_ROWS {
                    self.flush()?;
                }
            }
        }
        Ok(())
    }

    /// Rows handed over so far.
    pub fn rows(&self) -> usize {
        self.written + self.group_rows + self.pending.len()
    }

    /// Frames the pending rows and adds them to the current group.
    fn frame_pending(&mut self) -> Result<()> {
        let piece = (self.frame)(&self.pending)?;
        match &mut self.group {
            Some(g) => {
                g.vstack_mut_owned(piece)
                    .map_err(|e| Error::Write { path: self.path.clone(), message: e.to_string() })?;
            }
            None => self.group = Some(piece),
        }
        self.group_rows += self.pending.len();
        self.pending.clear();
        Ok(())
    }

    /// Writes the current group as one row group.
    fn flush(&mut self) -> Result<()> {
        let Some(mut df) = self.group.take() else { return Ok(()) };
        df.rechunk_mut();
        let w = self.writer.as_mut().ok_or_else(|| Error::Internal("a finished table was written to".into()))?;
        w.write_batch(&df).map_err(|e| Error::Write { path: self.path.clone(), message: e.to_string() })?;
        self.written += self.group_rows;
        self.group_rows = 0;
        Ok(())
    }

    /// Writes the last group and renames the file into place (a table of no rows has its
    /// schema and no row group). Returns the number of rows.
    pub fn finish(mut self) -> Result<usize> {
        if !self.pending.is_empty() {
            self.frame_pending()?;
        }
        if self.group_rows > 0 {
            self.flush()?;
        }
        let w = self.writer.take().ok_or_else(|| Error::Internal("a table was finished twice".into()))?;
        w.finish().map_err(|e| Error::Write { path: self.path.clone(), message: e.to_string() })?;
        std::fs::rename(&self.tmp, &self.path)
            .map_err(|e| Error::Write { path: self.path.clone(), message: e.to_string() })?;
        Ok(self.written)
    }
}

impl<T> Drop for RowGroupWriter<T> {
    fn drop(&mut self) {
        if self.writer.is_some() {
            let _ = std::fs::remove_file(&self.tmp);
        }
    }
}

/// The row groups of a whole write ([`write_parquet`]) of `n` rows held in one chunk: one group
/// below [`ROW_GROUP_ROWS`] rows; otherwise n / ROW_GROUP_ROWS groups of n / (that number)
/// rows, the last taking the remainder (polars' `chunk_df_for_writing`, which splits with
/// `split_and_flatten`).
pub fn whole_write_groups(n: usize) -> Vec<usize> {
    let target = n / ROW_GROUP_ROWS;
    if target <= 1 {
        return vec![n];
    }
    let size = n / target;
    let mut groups = vec![size; target - 1];
    groups.push(n - size * (target - 1));
    groups
}

/// A table gathered as frames of its rows, in order, while they are produced (a frame's columns
/// take far less memory than the rows as structs), and written at the end in the row groups of
/// a whole write, so that the file is byte for byte the one [`write_parquet`] gives all the rows
/// framed at once, while only one group at a time is copied into one piece.
pub struct FrameTable {
    path: std::path::PathBuf,
    metadata: Vec<(String, String)>,
    frame: DataFrame,
}

impl FrameTable {
    /// A table at `path` of the schema of `empty` (the frame of no rows).
    pub fn create(path: &Path, metadata: &[(String, String)], empty: DataFrame) -> Self {
        FrameTable { path: path.to_path_buf(), metadata: metadata.to_vec(), frame: empty }
    }

    /// Adds the rows of `df` (same schema) at the end of the table.
    pub fn push(&mut self, df: DataFrame) -> Result<()> {
        let failed = |e: PolarsError| Error::Write { path: self.path.clone(), message: e.to_string() };
        self.frame.vstack_mut_owned(df).map_err(failed)?;
        Ok(())
    }

    /// Writes the table (atomically) and returns its number of rows.
    pub fn finish(self) -> Result<usize> {
        let FrameTable { path, metadata, mut frame } = self;
        let n = frame.height();
        let groups = whole_write_groups(n);
        if groups.len() == 1 {
            frame.rechunk_mut();
            write_parquet(&mut frame, &path, &metadata)?;
            return Ok(n);
        }
        let failed = |e: PolarsError| Error::Write { path: path.to_path_buf(), message: e.to_string() };
        atomically(&path, |file| {
            let mut w = writer(file, &metadata).batched(frame.schema()).map_err(failed)?;
            let mut offset = 0;
            for len in groups {
                let mut group = frame.slice(offset as i64, len);
                group.rechunk_mut();
                w.write_batch(&group).map_err(failed)?;
                offset += len;
            }
            w.finish().map(|_| ()).map_err(failed)
        })?;
        Ok(n)
    }
}

/// Where a row goes in a table written as a folder of files ([`SplitWriter`]): a rank (files
/// of a lower rank come first), a group (e.g. the source or the method) and a year.
pub type FileKey = (u8, &'static str, i32);

/// A large table written as a folder of Parquet files, one per (rank, group, year) of its rows,
/// named `<rank>-<group>-<year>.parquet` (the year in four digits, so that names sort as keys
/// do). The rows must arrive in the order of their keys (the
/// table's own order does that: see the two large tables), so one file is open at a time and
/// the files, read in the order of their names, give the rows in table order. Each file is
/// written by a [`RowGroupWriter`] (same row groups, same temporary-name-and-rename). A table
/// without rows is one file of no rows, `empty.parquet`, which carries the schema.
pub struct SplitWriter<T> {
    dir: std::path::PathBuf,
    metadata: Vec<(String, String)>,
    frame: fn(&[T]) -> Result<DataFrame>,
    key: fn(&T) -> FileKey,
    current: Option<(FileKey, RowGroupWriter<T>)>,
    written: usize,
    /// Whether files of this table were put in the folder by other means (a merge copies the
    /// years a part holds whole): a table with no rows written here is then not empty.
    copied: bool,
}

impl<T> SplitWriter<T> {
    pub fn create(
        dir: &Path,
        metadata: &[(String, String)],
        frame: fn(&[T]) -> Result<DataFrame>,
        key: fn(&T) -> FileKey,
    ) -> Result<Self> {
        std::fs::create_dir_all(dir).map_err(|e| Error::Write { path: dir.to_path_buf(), message: e.to_string() })?;
        Ok(SplitWriter {
            dir: dir.to_path_buf(),
            metadata: metadata.to_vec(),
            frame,
            key,
            current: None,
            written: 0,
            copied: false,
        })
    }

    /// The file name of a key.
    pub fn file_name((rank, group, year): FileKey) -> String {
        format!("{rank}-{group}-{year:04}.parquet")
    }

    pub fn push(&mut self, rows: impl IntoIterator<Item = T>) -> Result<()> {
        for r in rows {
            let k = (self.key)(&r);
            match &mut self.current {
                Some((open, w)) if *open == k => w.push(std::iter::once(r))?,
                _ => {
                    if let Some((open, w)) = self.current.take() {
                        if k < open {
                            return Err(Error::Internal(format!(
                                "rows of {} came after those of {}",
                                Self::file_name(k),
                                Self::file_name(open)
                            )));
                        }
                        self.written += w.finish()?;
                    }
                    let mut w = RowGroupWriter::create(&self.dir.join(Self::file_name(k)), &self.metadata, self.frame)?;
                    w.push(std::iter::once(r))?;
                    self.current = Some((k, w));
                }
            }
        }
        Ok(())
    }

    pub fn finish(mut self) -> Result<usize> {
        match self.current.take() {
            Some((_, w)) => self.written += w.finish()?,
            None if self.copied => {}
            None => {
                RowGroupWriter::create(&self.dir.join("empty.parquet"), &self.metadata, self.frame)?.finish()?;
            }
        }
        Ok(self.written)
    }
}

/// A table's writer: one file, or a folder of files ([`SplitWriter`]).
pub enum TableWriter<T> {
    One(RowGroupWriter<T>),
    Split(SplitWriter<T>),
}

impl<T> TableWriter<T> {
    pub fn push(&mut self, rows: impl IntoIterator<Item = T>) -> Result<()> {
        match self {
            TableWriter::One(w) => w.push(rows),
            TableWriter::Split(w) => w.push(rows),
        }
    }

    pub fn finish(self) -> Result<usize> {
        match self {
            TableWriter::One(w) => w.finish(),
            TableWriter::Split(w) => w.finish(),
        }
    }

    /// Notes that some of the table's rows are in files copied into its folder, not written
    /// here (see [`WriterThread::fold_only`]); a one-file table cannot have them.
    fn note_copied(&mut self) -> Result<()> {
        match self {
            TableWriter::One(_) => Err(Error::Internal("rows were copied into a one-file table".into())),
            TableWriter::Split(w) => {
                w.copied = true;
                Ok(())
            }
        }
    }
}

enum ToWriter<T> {
    Rows(Vec<T>),
    /// Rows of the table that are in a file copied into its folder: folded, not written.
    Folded(Vec<T>),
    Finish,
}

/// Something that looks at a table's rows as they are written, in table order.
pub trait RowFold<T>: Send + 'static {
    fn add(&mut self, rows: &[T]);
}

impl<T> RowFold<T> for () {
    fn add(&mut self, _: &[T]) {}
}

impl<T, F: RowFold<T>> RowFold<T> for Option<F> {
    fn add(&mut self, rows: &[T]) {
        if let Some(f) = self {
            f.add(rows);
        }
    }
}

/// A [`RowGroupWriter`] on a thread of its own, so that encoding and compressing a table (and
/// a [`RowFold`] over its rows) overlaps with whatever produces the rows. Rows go over a
/// channel that holds one batch; dropped unfinished (an error elsewhere), the thread drops
/// its writer, which removes the temporary file.
pub struct WriterThread<T, F = ()> {
    tx: Option<std::sync::mpsc::SyncSender<ToWriter<T>>>,
    handle: Option<std::thread::JoinHandle<Result<(usize, F)>>>,
}

impl<T: Send + 'static, F: RowFold<T>> WriterThread<T, F> {
    pub fn spawn(mut writer: TableWriter<T>, mut fold: F) -> Self {
        let (tx, rx) = std::sync::mpsc::sync_channel::<ToWriter<T>>(1);
        let handle = std::thread::spawn(move || -> Result<(usize, F)> {
            for message in rx {
                match message {
                    ToWriter::Rows(rows) => {
                        fold.add(&rows);
                        writer.push(rows)?;
                    }
                    ToWriter::Folded(rows) => {
                        fold.add(&rows);
                        writer.note_copied()?;
                    }
                    ToWriter::Finish => return Ok((writer.finish()?, fold)),
                }
            }
            Err(Error::Internal("a table's writer was stopped before the table was finished".into()))
        });
        WriterThread { tx: Some(tx), handle: Some(handle) }
    }

    /// The writer thread's own error, once it has stopped.
    fn stopped(&mut self) -> Error {
        self.tx = None;
        match self.handle.take().map(|h| h.join()) {
            Some(Ok(Err(e))) => e,
            _ => Error::Internal("a table's writer stopped unexpectedly".into()),
        }
    }

    /// Adds rows at the end of the table.
    pub fn push(&mut self, rows: Vec<T>) -> Result<()> {
        self.send(ToWriter::Rows(rows))
    }

    /// Rows of the table, in its order, that are already in a file copied into the table's
    /// folder: the fold sees them in their place; nothing is written.
    pub fn fold_only(&mut self, rows: Vec<T>) -> Result<()> {
        self.send(ToWriter::Folded(rows))
    }

    fn send(&mut self, message: ToWriter<T>) -> Result<()> {
        let sent = self.tx.as_ref().is_some_and(|tx| tx.send(message).is_ok());
        if sent {
            Ok(())
        } else {
            Err(self.stopped())
        }
    }

    /// Finishes the table (see [`RowGroupWriter::finish`]) and returns its number of rows and
    /// the fold.
    pub fn finish(mut self) -> Result<(usize, F)> {
        let sent = self.tx.take().is_some_and(|tx| tx.send(ToWriter::Finish).is_ok());
        let joined = self.handle.take().map(|h| h.join());
        match (sent, joined) {
            (_, Some(Ok(r))) => r,
            _ => Err(Error::Internal("a table's writer stopped unexpectedly".into())),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn frame(rows: &[usize]) -> Result<DataFrame> {
        let label = |i: usize| format!("Entity number {}", i % 37);
        TableBuilder::new()
            .ints("row", rows.iter().map(|&i| Some(i as i64)))
            .strings("entity", rows.iter().map(|&i| Some(label(i))))
            .floats("value", rows.iter().map(|&i| (i % 11 != 0).then(|| (i as f64).sqrt())))
            .finish()
    }

    /// The string column with shared long values holds the values polars' own collection of
    /// the same strings holds, and writes the same Parquet bytes: runs of one long value,
    /// long values alternating, short (inline) values inside runs, nulls between runs (so the
    /// shared values after the first null carry a validity bit), a value that comes back after
    /// another, values of exactly 12 and 13 bytes, multi-byte text.
    #[test]
    fn shared_long_strings_are_the_plain_column() {
        let long = ["Entity number 0001 of the panel", "Entity number 0002 of the panel", "déjà vu, naïve café"];
        let mut values: Vec<Option<String>> = Vec::new();
        for i in 0..20_000usize {
            let v = match i % 23 {
                0 => None,
                1..=3 => Some("short".to_string()),
                4 => Some("twelve bytes".to_string()),
                5 | 6 => Some("thirteen byte".to_string()),
                k => Some(long[(i / 23 + k / 9) % 3].to_string()),
            };
            values.push(v);
        }
        values.extend(std::iter::repeat_n(Some(long[0].to_string()), 5000));
        let dir = tempfile::tempdir().unwrap();
        let mut files = Vec::new();
        for (k, plain) in [false, true].into_iter().enumerate() {
            let mut df = if plain {
                let ca: StringChunked = values.iter().map(|v| v.as_deref()).collect();
                DataFrame::new_infer_height(vec![ca.with_name("text".into()).into_column()]).unwrap()
            } else {
                TableBuilder::new().strings("text", values.iter().map(|v| v.as_deref())).finish().unwrap()
            };
            let path = dir.path().join(format!("{k}.parquet"));
            write_parquet(&mut df, &path, &[]).unwrap();
            files.push((df, std::fs::read(&path).unwrap()));
        }
        assert!(files[0].0.equals_missing(&files[1].0), "the values differ");
        assert_eq!(files[0].0.column("text").unwrap().null_count(), 20_000usize.div_ceil(23));
        assert!(files[0].1 == files[1].1, "the Parquet bytes differ");
        let back = ParquetReader::new(std::fs::File::open(dir.path().join("0.parquet")).unwrap()).finish().unwrap();
        assert!(back.equals_missing(&files[1].0), "the values read back differ");
    }

    #[test]
    fn the_bytes_do_not_depend_on_how_rows_are_handed_over() {
        // Heights below one group, of exactly one, of one and a half, and of three groups with
        // a remainder; empty. Rows pushed all at once and in uneven pieces give one file.
        let dir = tempfile::tempdir().unwrap();
        let meta = vec![("hazardline.test".to_string(), "x".to_string())];
        for height in [0, 5, ROW_GROUP_ROWS, ROW_GROUP_ROWS * 3 / 2, 3 * ROW_GROUP_ROWS + 7] {
            let (a, b) =
                (dir.path().join(format!("one-{height}.parquet")), dir.path().join(format!("pieces-{height}.parquet")));
            let mut w = RowGroupWriter::create(&a, &meta, frame).unwrap();
            w.push(0..height).unwrap();
            assert_eq!(w.finish().unwrap(), height);
            let mut w = RowGroupWriter::create(&b, &meta, frame).unwrap();
            let mut start = 0;
            for piece in [1usize, 1000, 77_777, ROW_GROUP_ROWS, 3].iter().cycle().take(20) {
                let end = (start + piece).min(height);
                w.push(start..end).unwrap();
                start = end;
            }
            w.push(start..height).unwrap();
            w.finish().unwrap();
            assert!(std::fs::read(&a).unwrap() == std::fs::read(&b).unwrap(), "height {height}: the files differ");
            // Every row comes back, in order, in groups of ROW_GROUP_ROWS.
            let df = ParquetReader::new(std::fs::File::open(&a).unwrap()).finish().unwrap();
            assert!(
                df.equals_missing(&frame(&(0..height).collect::<Vec<_>>()).unwrap()),
                "height {height}: rows differ"
            );
            let md = ParquetReader::new(std::fs::File::open(&a).unwrap()).get_metadata().unwrap().clone();
            let groups: Vec<usize> = md.row_groups.iter().map(|g| g.num_rows()).collect();
            let want: Vec<usize> = (0..height.div_ceil(ROW_GROUP_ROWS))
                .map(|i| (height - i * ROW_GROUP_ROWS).min(ROW_GROUP_ROWS))
                .collect();
            assert_eq!(groups, want, "height {height}");
        }
    }

    /// The rows framed in pieces as they arrive write the bytes of each group's rows framed at
    /// once (how the writer worked before the pieces): columns with nulls in some pieces and
    /// none in others, a text column null throughout some pieces, long and inline strings,
    /// groups that end inside a handed-over batch, a last group that is not whole.
    #[test]
    fn pieces_write_the_bytes_of_whole_groups() {
        fn sparse(rows: &[usize]) -> Result<DataFrame> {
            TableBuilder::new()
                .ints("row", rows.iter().map(|&i| Some(i as i64)))
                .strings("entity", rows.iter().map(|&i| (i % 5000 != 7).then(|| format!("Entity number {}", i / 900))))
                .strings("note", rows.iter().map(|&i| ((i / PIECE_ROWS) % 3 == 1 && i % 9 == 0).then_some("short")))
                .floats("value", rows.iter().map(|&i| (i % 70_001 != 0).then(|| (i as f64).sqrt())))
                .dates("date", rows.iter().map(|&i| NaiveDate::from_num_days_from_ce_opt(730_000 + (i / 8) as i32)))
                .finish()
        }
        let dir = tempfile::tempdir().unwrap();
        let meta = vec![("hazardline.test".to_string(), "x".to_string())];
        let height = 2 * ROW_GROUP_ROWS + 12_345;
        let rows: Vec<usize> = (0..height).collect();
        let (a, b) = (dir.path().join("pieces.parquet"), dir.path().join("groups.parquet"));
        let mut w = RowGroupWriter::create(&a, &meta, sparse).unwrap();
        for batch in rows.chunks(65_000) {
            w.push(batch.iter().copied()).unwrap();
        }
        assert_eq!(w.finish().unwrap(), height);
        let file = std::fs::File::create(&b).unwrap();
        let mut whole = writer(file, &meta).batched(sparse(&[]).unwrap().schema()).unwrap();
        for group in rows.chunks(ROW_GROUP_ROWS) {
            let mut df = sparse(group).unwrap();
            df.rechunk_mut();
            whole.write_batch(&df).unwrap();
        }
        whole.finish().unwrap();
        assert!(std::fs::read(&a).unwrap() == std::fs::read(&b).unwrap(), "the files differ");
    }

    #[test]
    fn a_split_table_writes_a_file_per_key_in_order() {
        let dir = tempfile::tempdir().unwrap();
        let key = |r: &usize| -> FileKey {
            (1 + u8::from(*r >= 20), if *r >= 20 { "late" } else { "early" }, (*r / 10) as i32)
        };
        let t = dir.path().join("t");
        let mut w = SplitWriter::create(&t, &[], frame, key).unwrap();
        for piece in [0..3, 3..17, 17..18, 18..25] {
            w.push(piece).unwrap();
        }
        assert_eq!(w.finish().unwrap(), 25);
        let files = crate::tables::readback::table_files(&t).unwrap();
        let names: Vec<String> = files.iter().map(|f| f.file_name().unwrap().to_string_lossy().to_string()).collect();
        assert_eq!(names, ["1-early-0000.parquet", "1-early-0001.parquet", "2-late-0002.parquet"]);
        let df = crate::tables::readback::read_frame(&t).unwrap();
        assert!(df.equals_missing(&frame(&(0..25).collect::<Vec<_>>()).unwrap()));
        // Rows that would go back to a finished file are a bug, not a silent reorder.
        let mut w = SplitWriter::create(&dir.path().join("u"), &[], frame, key).unwrap();
        w.push([12usize]).unwrap();
        assert!(w.push([3usize]).is_err());
        // No rows: one empty file that carries the schema.
        SplitWriter::create(&dir.path().join("v"), &[], frame, key).unwrap().finish().unwrap();
        let df = crate::tables::readback::read_frame(&dir.path().join("v")).unwrap();
        assert_eq!((df.height(), df.width()), (0, 3));
    }

    #[test]
    fn an_unfinished_table_leaves_no_file() {
        let dir = tempfile::tempdir().unwrap();
        let mut w = RowGroupWriter::create(&dir.path().join("t.parquet"), &[], frame).unwrap();
        w.push(0..10).unwrap();
        drop(w);
        assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 0);
    }
}

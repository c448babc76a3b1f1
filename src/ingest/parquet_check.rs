//! A check of a Parquet input's structure, run before the table reader decodes it.
//!
//! The table reader decodes a file's pages on its own worker threads, where a fault it does
//! not expect ends the process instead of returning an error: a column chunk whose recorded
//! place runs past the end of the file (an out-of-bounds slice), or a run-length-encoded run of
//! levels or dictionary indices longer than its page (a memory request of exabytes, which
//! aborts). Both were found by flipping single bytes of a valid file (the mutated-Parquet
//! property test and the byte-by-byte sweep in `tests/all/quality.rs`). This check reads the
//! footer, then every page of every column chunk, on the calling thread, where a panic can be
//! caught, and refuses such a file with a message naming the row group, column and page.
//!
//! The encodings walked here are those of the Parquet format specification (the
//! run-length / bit-packing hybrid for levels and dictionary indices: a ULEB128 header whose
//! low bit tells a bit-packed run of `header >> 1` groups of 8 values from an RLE run of
//! `header >> 1` repeats of one value). The check reads each column chunk once and
//! decompresses its pages; it does not decode the values themselves.

use polars_parquet::parquet::compression::DecompressionContext;
use polars_parquet::parquet::encoding::Encoding;
use polars_parquet::parquet::page::{split_buffer, Page};
use polars_parquet::parquet::read::{decompress, read_metadata, PageMetaData, PageReader};
use std::io::{Read, Seek, SeekFrom};
use std::path::Path;

/// The largest page the check reads (the reader's own limit for one page).
const MAX_PAGE_BYTES: usize = 1 << 30;

/// Checks the structure of the Parquet file at `path`; `Err` holds what is wrong, in words.
pub fn check_parquet(path: &Path) -> Result<(), String> {
    match std::panic::catch_unwind(|| check(path)) {
        Ok(r) => r,
        Err(_) => Err("the file is damaged: its structure could not be read".into()),
    }
}

fn check(path: &Path) -> Result<(), String> {
    let mut file = std::fs::File::open(path).map_err(|e| e.to_string())?;
    let file_len = file.metadata().map_err(|e| e.to_string())?.len();
    let meta = read_metadata(&mut file).map_err(|e| format!("the footer cannot be read: {e}"))?;
    // The column chunks lie between the leading magic bytes and the footer.
    let data_end = file_len.saturating_sub(8);
    for (g, group) in meta.row_groups.iter().enumerate() {
        for column in group.parquet_columns() {
            let name = column.descriptor().path_in_schema.join(".");
            let place = |what: String| format!("the file is damaged: row group {}, column `{name}`: {what}", g + 1);
            let range = column.byte_range();
            if range.start < 4 || range.end > data_end || range.start > range.end {
                return Err(place(format!(
                    "its data is recorded at bytes {}..{}, outside the {file_len}-byte file",
                    range.start as i64, range.end as i64
                )));
            }
            let declared = usize::try_from(column.num_values())
                .map_err(|_| place(format!("it records {} values", column.num_values())))?;
            let mut chunk = vec![0u8; (range.end - range.start) as usize];
            file.seek(SeekFrom::Start(range.start)).map_err(|e| e.to_string())?;
            file.read_exact(&mut chunk).map_err(|e| place(e.to_string()))?;
            let pages = PageReader::new_with_page_meta(
                std::io::Cursor::new(chunk.into()),
                PageMetaData::from(column),
                Vec::new(),
                MAX_PAGE_BYTES,
            );
            let max_def = column.descriptor().descriptor.max_def_level;
            let mut seen = 0usize;
            let (mut buffer, mut context) = (Vec::new(), DecompressionContext::Unset);
            for (p, page) in pages.enumerate() {
                let at = |what: String| place(format!("page {}: {what}", p + 1));
                let page = page.map_err(|e| at(e.to_string()))?;
                let Page::Data(page) = decompress(page, &mut buffer, &mut context).map_err(|e| at(e.to_string()))?
                else {
                    continue;
                };
                let n = page.num_values();
                seen = seen.saturating_add(n);
                if seen > declared {
                    return Err(at(format!("the pages hold more than the {declared} values the chunk records")));
                }
                let parts = split_buffer(&page).map_err(|e| at(e.to_string()))?;
                let present = if max_def > 0 && page.definition_level_encoding() == Encoding::Rle {
                    let width = bit_width(max_def as u32);
                    hybrid_runs(parts.def, width, n, Some(max_def as u32)).map_err(|e| at(format!("levels: {e}")))?
                } else {
                    n
                };
                if matches!(page.encoding(), Encoding::RleDictionary | Encoding::PlainDictionary) {
                    if let Some((&width, runs)) = parts.values.split_first() {
                        if width > 32 {
                            return Err(at(format!("dictionary indices of {width} bits")));
                        }
                        hybrid_runs(runs, u32::from(width), present, None)
                            .map_err(|e| at(format!("dictionary indices: {e}")))?;
                    }
                }
            }
        }
    }
    Ok(())
}

/// Bits needed to write values up to `max`.
fn bit_width(max: u32) -> u32 {
    32 - max.leading_zeros()
}

/// Walks the run-length / bit-packing hybrid `buf` of values `width` bits wide and checks that
/// no run holds more than the `limit` values the page has room for (a bit-packed run may pad
/// its last group of 8). With `count_of = Some(max)`, returns how many of the values equal
/// `max` (the present values, for definition levels); otherwise `limit`.
fn hybrid_runs(buf: &[u8], width: u32, limit: usize, count_of: Option<u32>) -> Result<usize, String> {
    let value_bytes = width.div_ceil(8) as usize;
    let (mut at, mut total, mut hits) = (0usize, 0usize, 0usize);
    while at < buf.len() && total < limit {
        let (header, used) = uleb128(&buf[at..]).ok_or("a run header is cut off")?;
        at += used;
        let left = limit - total;
        if header & 1 == 1 {
            let values = (header >> 1).saturating_mul(8);
            if values > left.saturating_add(7) as u64 {
                return Err(format!("a bit-packed run of {values} values where {left} are left"));
            }
            let bytes = ((header >> 1) as usize).saturating_mul(width as usize);
            let taken = (values as usize).min(left);
            if let Some(max) = count_of {
                let end = at.saturating_add(bytes).min(buf.len());
                hits += count_packed(&buf[at..end], width, taken, max);
            }
            total += taken;
            at = at.saturating_add(bytes);
        } else {
            let repeats = header >> 1;
            if repeats > left as u64 {
                return Err(format!("a run of {repeats} repeats where {left} values are left"));
            }
            let end = at.saturating_add(value_bytes).min(buf.len());
            let mut value = 0u64;
            for (k, b) in buf[at..end].iter().enumerate() {
                value |= u64::from(*b) << (8 * k);
            }
            if count_of.is_some_and(|max| value == u64::from(max)) {
                hits += repeats as usize;
            }
            total += repeats as usize;
            at = end;
        }
    }
    Ok(if count_of.is_some() { hits } else { limit })
}

/// How many of the first `n` values packed `width` bits each (least significant bit first) in
/// `bytes` equal `max`.
fn count_packed(bytes: &[u8], width: u32, n: usize, max: u32) -> usize {
    if width == 1 && max == 1 {
        // The common case (a flat nullable column's definition levels): count the set bits a
        // byte at a time.
        let whole = (n / 8).min(bytes.len());
        let mut hits: usize = bytes[..whole].iter().map(|b| b.count_ones() as usize).sum();
        if let Some(last) = bytes.get(whole).filter(|_| n % 8 != 0) {
            hits += (last & ((1u8 << (n % 8)) - 1)).count_ones() as usize;
        }
        return hits;
    }
    let mut hits = 0;
    for i in 0..n {
        let mut v = 0u32;
        for b in 0..width as usize {
            let bit = i * width as usize + b;
            if bytes.get(bit / 8).is_some_and(|byte| byte >> (bit % 8) & 1 == 1) {
                v |= 1 << b;
            }
        }
        hits += usize::from(v == max);
    }
    hits
}

/// An unsigned LEB128 number and the bytes it took; `None` if cut off or over 64 bits.
fn uleb128(buf: &[u8]) -> Option<(u64, usize)> {
    let mut v = 0u64;
    for (i, b) in buf.iter().enumerate().take(10) {
        v |= u64::from(b & 0x7f).checked_shl(7 * i as u32)?;
        if b & 0x80 == 0 {
            return Some((v, i + 1));
        }
    }
    None
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn hybrid_runs_are_bounded_by_the_page() {
        // RLE: header 2 * 5 = 10 -> five repeats of the one-byte value 1.
        assert_eq!(hybrid_runs(&[10, 1], 1, 5, Some(1)), Ok(5));
        assert_eq!(hybrid_runs(&[10, 0], 1, 5, Some(1)), Ok(0));
        // Five repeats where the page has room for four.
        assert!(hybrid_runs(&[10, 1], 1, 4, Some(1)).unwrap_err().contains("a run of 5 repeats where 4"));
        // Bit-packed: header 2 * 1 + 1 = 3 -> one group of 8 values, 1 bit each: 0b0000_0101.
        assert_eq!(hybrid_runs(&[3, 0b0000_0101], 1, 3, Some(1)), Ok(2));
        // The byte-at-a-time count of one-bit levels agrees with the general loop.
        let bytes = [0b1011_0110u8, 0b0000_0111, 0xFF];
        for n in 0..=24 {
            let slow = (0..n).filter(|&i| bytes[i / 8] >> (i % 8) & 1 == 1).count();
            assert_eq!(count_packed(&bytes, 1, n, 1), slow, "n = {n}");
        }
        assert_eq!(count_packed(&[0b0000_1110], 2, 2, 3), 1, "two 2-bit values 2 and 3");
        // A group count in the billions (a flipped high byte of the header).
        assert!(hybrid_runs(&[0x81, 0x80, 0x80, 0x80, 0x10], 1, 3, Some(1)).is_err());
        // A cut-off header.
        assert!(hybrid_runs(&[0x80], 1, 3, None).is_err());
        assert_eq!(uleb128(&[0xe5, 0x8e, 0x26]), Some((624_485, 3)));
        assert_eq!(bit_width(1), 1);
        assert_eq!(bit_width(2), 2);
        assert_eq!(bit_width(0), 0);
    }
}

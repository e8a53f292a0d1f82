//! Reading one channel of a checked `f64[channel, time, config]` block into the buffer that
//! becomes its [`crate::data::Series`], with as little work per byte as the layout allows.
//!
//! Why it exists: a packed read is dominated by per-byte work, so every extra pass counts
//! (production size: 230 MB, 1572 channel reads). A dataset that `formfactory pack` wrote is
//! contiguous, unfiltered little-endian IEEE `f64`: its channels are consecutive byte runs
//! at the offset the library reports (`H5Dget_offset`, counted from the start of the file,
//! user block included), read here with one plain file read per channel straight into the
//! channel's buffer; that costs no library call per channel (about 30 µs each through a
//! hyperslab selection), no copy of the whole block and no decoding pass. Any other storage (another byte order, chunks,
//! filters, external files) is read through a library hyperslab per channel, which converts
//! as needed.

use crate::error::Result;
use crate::io::hdf5::dataset::dataset_error;
use std::io::{Read, Seek, SeekFrom};
use std::path::Path;

/// The channels of one dataset, read in order.
pub struct ChannelValues<'a> {
    how: How,
    /// Values per channel (`n_t * n_cfg`).
    size: usize,
    /// Channels read so far (the next channel's index).
    next: usize,
    path: &'a Path,
    name: String,
}

enum How {
    /// Consecutive little-endian doubles from the file's current position.
    Raw(std::fs::File),
    /// One library hyperslab read per channel.
    Library(hdf5::Dataset),
}

impl<'a> ChannelValues<'a> {
    /// Prepare reading `ds` (already checked: `f64`, shape `[n, n_t, n_cfg]` with `size =
    /// n_t * n_cfg`, no more bytes than the file of `len` bytes has) channel by channel.
    pub fn new(
        ds: hdf5::Dataset,
        size: usize,
        len: u64,
        path: &'a Path,
        name: String,
    ) -> Result<Self> {
        let err = |m: String| dataset_error(path, &name, m);
        let how = match raw_offset(&ds) {
            Some(offset) => {
                let n = ds.shape().first().copied().unwrap_or(0) as u64;
                let bytes = n * size as u64 * 8;
                if offset.checked_add(bytes).is_none_or(|end| end > len) {
                    return Err(err(format!(
                        "claims {bytes} bytes at offset {offset} in a file of {len} bytes (damaged or truncated?)"
                    )));
                }
                let mut file =
                    crate::io::open_regular(path).map_err(|e| err(format!("cannot open: {e}")))?;
                file.seek(SeekFrom::Start(offset))
                    .map_err(|e| err(format!("cannot read: {e}")))?;
                How::Raw(file)
            }
            None => How::Library(ds),
        };
        Ok(ChannelValues {
            how,
            size,
            next: 0,
            path,
            name,
        })
    }

    /// The file this reads.
    pub fn path(&self) -> &Path {
        self.path
    }

    /// The dataset this reads.
    pub fn name(&self) -> &str {
        &self.name
    }

    /// Read the values of the next channel, time-major, into `values`: into its memory when
    /// it already holds a channel (a streaming reader's reused buffer), else into a fresh
    /// zeroed allocation (which the system maps lazily, so no page is written twice).
    pub fn next_channel_into(&mut self, values: &mut Vec<f64>) -> Result<()> {
        let c = self.next;
        self.next += 1;
        let err = |m: String| dataset_error(self.path, &self.name, m);
        match &mut self.how {
            How::Raw(file) => {
                if values.len() != self.size {
                    if values.capacity() >= self.size {
                        values.resize(self.size, 0.0);
                    } else {
                        *values = vec![0.0; self.size];
                    }
                }
                read_le(file, values).map_err(|e| err(format!("cannot read channel {c}: {e}")))
            }
            How::Library(ds) => {
                use hdf5::SliceOrIndex;
                let slab = hdf5::Hyperslab::from(vec![
                    SliceOrIndex::Index(c),
                    SliceOrIndex::from(..),
                    SliceOrIndex::from(..),
                ]);
                let read = ds
                    .read_slice_2d::<f64, _>(slab)
                    .map_err(|e| err(format!("cannot read channel {c}: {e}")))?;
                // A freshly read array is in standard order from its buffer's first element.
                let (read, offset) = read.into_raw_vec_and_offset();
                if offset.is_some_and(|o| o != 0) || read.len() != self.size {
                    return Err(err(format!(
                        "channel {c} came back in an unexpected layout"
                    )));
                }
                *values = read;
                Ok(())
            }
        }
    }
}

/// Fill `values` with consecutive little-endian doubles read from `file`: on a little-endian
/// machine straight into their memory (one copy, by the kernel), else through a buffer.
fn read_le(file: &mut std::fs::File, values: &mut [f64]) -> std::io::Result<()> {
    if cfg!(target_endian = "little") {
        // SAFETY: the byte view covers exactly the memory of `values` (alignment 1 is always
        // met), it is the only live reference to it while the read fills it, and every bit
        // pattern is a valid `f64`, so any bytes the read leaves behind are valid values.
        let bytes = unsafe {
            std::slice::from_raw_parts_mut(
                values.as_mut_ptr().cast::<u8>(),
                std::mem::size_of_val(values),
            )
        };
        file.read_exact(bytes)
    } else {
        let mut bytes = vec![0u8; std::mem::size_of_val(values)];
        file.read_exact(&mut bytes)?;
        for (v, b) in values.iter_mut().zip(bytes.chunks_exact(8)) {
            let mut le = [0u8; 8];
            le.copy_from_slice(b);
            *v = f64::from_le_bytes(le);
        }
        Ok(())
    }
}

/// The byte offset of `ds` in its file when its values can be read there directly:
/// contiguous, allocated, unfiltered, not external, little-endian IEEE `f64`.
fn raw_offset(ds: &hdf5::Dataset) -> Option<u64> {
    let native = hdf5::Datatype::from_type::<f64>().ok()?;
    let dtype = ds.dtype().ok()?;
    let plain = dtype == native
        && matches!(dtype.byte_order(), hdf5::datatype::ByteOrder::LittleEndian)
        && ds.layout() == hdf5::dataset::Layout::Contiguous
        && ds.filters().is_empty()
        && ds.dcpl().is_ok_and(|p| p.external().is_empty());
    if plain {
        ds.offset()
    } else {
        None
    }
}

/// The index of the first value that is not finite. `x * 0` is `0` for a finite `x` and NaN
/// otherwise, so eight running sums stay zero exactly while every value is finite; that loop
/// has no branch per value and vectorises, and the position is searched only on failure.
pub fn first_non_finite(values: &[f64]) -> Option<usize> {
    let mut sums = [0.0f64; 8];
    let mut blocks = values.chunks_exact(8);
    for b in &mut blocks {
        for (s, v) in sums.iter_mut().zip(b) {
            *s += v * 0.0;
        }
    }
    let tail_finite = blocks.remainder().iter().all(|v| v.is_finite());
    if tail_finite && sums.iter().all(|s| *s == 0.0) {
        None
    } else {
        values.iter().position(|v| !v.is_finite())
    }
}

#[cfg(test)]
mod tests {
    use super::first_non_finite;

    #[test]
    fn finds_the_first_non_finite_value_anywhere() {
        let mut v = vec![1.5; 37];
        assert_eq!(first_non_finite(&v), None);
        assert_eq!(first_non_finite(&[]), None);
        for (i, bad) in [(0, f64::NAN), (9, f64::INFINITY), (36, f64::NEG_INFINITY)] {
            v[i] = bad;
            assert_eq!(first_non_finite(&v), Some(i));
            v[i] = -0.0;
        }
        assert_eq!(first_non_finite(&[f64::MAX, f64::MIN, 1e-310]), None);
    }
}

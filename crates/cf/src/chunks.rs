//! Compressed chunks written straight into the HDF5 layer of a NetCDF-4 file.
//!
//! netCDF-C compresses every chunk itself, on one thread, under the library's process-wide
//! lock: for a batch run that is most of the writing time, and the lock also stops the reads
//! of the next step. Here the file is defined by netCDF-C as usual (dimensions, variables,
//! chunk shapes, the shuffle and deflate filters, attributes, static values) and closed; it is
//! then opened with HDF5 (the same library netCDF-C wrote it with) and each step's chunks are
//! shuffled and deflated on all cores by the caller ([`encode`]) and handed to HDF5 already
//! compressed (`H5Dwrite_chunk`), which only appends them to the file. The result is a
//! standard NetCDF-4 file: the filters recorded are those netCDF-C defined, and every reader
//! decodes the chunks through them.
//!
//! Facts this rests on (checked when the file is opened, or tested):
//! - the filter pipeline of each chunked variable is (shuffle, deflate) in that order, or empty
//!   when uncompressed; the chunk shape is one step × one layer × the grid;
//! - the shuffle filter stores all first bytes of the chunk's elements, then all second bytes,
//!   and so on (little-endian `float` here); HDF5's deflate filter stores a zlib stream (header
//!   and Adler-32 trailer), not raw deflate;
//! - filter mask bit i set means filter i was skipped: a chunk that does not shrink is stored
//!   raw with both bits set;
//! - an unlimited dimension must be extended (`H5Dset_extent`) before a chunk at the new step
//!   is written; every HDF5 return code is checked (netCDF-C silences HDF5's error printing).
//!
//! Every HDF5 call runs on the crate's netCDF thread under the library's global lock, like
//! every netCDF call.

#![allow(unsafe_code)]

use std::ffi::CString;
use std::path::Path;

use hdf5_metno_sys::h5d::{H5Dclose, H5Dget_create_plist, H5Dopen2, H5Dset_extent, H5Dwrite_chunk};
use hdf5_metno_sys::h5f::{H5F_ACC_RDWR, H5Fclose, H5Fopen};
use hdf5_metno_sys::h5i::hid_t;
use hdf5_metno_sys::h5p::{H5P_DEFAULT, H5Pclose, H5Pget_chunk, H5Pget_filter2, H5Pget_nfilters};
use hdf5_metno_sys::h5z::{H5Z_FILTER_DEFLATE, H5Z_FILTER_SHUFFLE};

/// Tells HDF5 not to close files at process exit. A file whose writes failed (disk full, file
/// size limit) cannot be closed cleanly, and HDF5's exit handler then crashes trying again;
/// every file of this crate is closed explicitly, and a failed output is deleted anyway. Must
/// run before the first library call of the process to take effect.
pub(crate) fn skip_exit_cleanup() {
    // SAFETY: H5dont_atexit only sets a flag in the library; it takes no arguments.
    unsafe {
        hdf5_metno_sys::h5::H5dont_atexit();
    }
}

/// The netCDF default fill value of `double`, for the unused part of the time chunk.
const FILL_F64: f64 = 9.969_209_968_386_869e36;

/// One encoded chunk: the filter mask and the bytes to store.
#[derive(Debug, Clone, PartialEq, Eq)]
pub(crate) struct Encoded {
    /// Bit i set: filter i of the pipeline was skipped.
    pub mask: u32,
    /// The stored bytes.
    pub bytes: Vec<u8>,
}

/// The shuffle filter's byte order: every element's byte 0, then every byte 1, and so on.
pub(crate) fn shuffle(values: &[f32]) -> Vec<u8> {
    let n = values.len();
    let mut out = vec![0u8; 4 * n];
    let (b0, rest) = out.split_at_mut(n);
    let (b1, rest) = rest.split_at_mut(n);
    let (b2, b3) = rest.split_at_mut(n);
    for (i, v) in values.iter().enumerate() {
        let b = v.to_le_bytes();
        b0[i] = b[0];
        b1[i] = b[1];
        b2[i] = b[2];
        b3[i] = b[3];
    }
    out
}

thread_local! {
    static COMPRESSOR: std::cell::RefCell<Option<(i32, libdeflater::Compressor)>> =
        const { std::cell::RefCell::new(None) };
}

/// Encodes one chunk for the pipeline (shuffle, deflate at `level`), or stores it raw when
/// `level` is `None` (no filters) or when compression would not shrink it.
pub(crate) fn encode(values: &[f32], level: Option<i32>) -> Encoded {
    let raw = || values.iter().flat_map(|v| v.to_le_bytes()).collect::<Vec<u8>>();
    let Some(level) = level else { return Encoded { mask: 0, bytes: raw() } };
    let shuffled = shuffle(values);
    let compressed = COMPRESSOR.with(|cell| {
        let mut cell = cell.borrow_mut();
        if cell.as_ref().is_none_or(|(l, _)| *l != level) {
            let lvl = libdeflater::CompressionLvl::new(level)
                .unwrap_or_else(|_| libdeflater::CompressionLvl::fastest());
            *cell = Some((level, libdeflater::Compressor::new(lvl)));
        }
        let (_, c) = cell.as_mut().expect("set above");
        let mut out = vec![0u8; c.zlib_compress_bound(shuffled.len())];
        c.zlib_compress(&shuffled, &mut out).ok().map(|n| {
            out.truncate(n);
            out
        })
    });
    match compressed {
        Some(bytes) if bytes.len() < shuffled.len() => Encoded { mask: 0, bytes },
        _ => Encoded { mask: 0b11, bytes: raw() },
    }
}

/// A time-varying chunked variable opened in HDF5.
#[derive(Debug)]
struct DirectVar {
    name: String,
    dataset: hid_t,
    /// Lengths of the dimensions after time.
    shape: Vec<usize>,
}

/// An output file opened in HDF5 for direct chunk writes.
#[derive(Debug)]
pub(crate) struct Direct {
    file: hid_t,
    vars: Vec<DirectVar>,
    time: hid_t,
    time_chunk: usize,
    times: Vec<f64>,
    level: Option<i32>,
}

fn check(status: i32, what: impl FnOnce() -> String) -> Result<(), String> {
    if status < 0 {
        Err(format!("HDF5 failed while {} ({})", what(), crate::write::disk_hint()))
    } else {
        Ok(())
    }
}

/// The filters and chunk shape of a dataset.
fn layout(dataset: hid_t, rank: usize) -> Result<(Vec<i32>, Vec<usize>), String> {
    // SAFETY: `dataset` is an open dataset id; the property list is closed before returning;
    // the buffers passed are as long as the counts given with them.
    unsafe {
        let dcpl = H5Dget_create_plist(dataset);
        if dcpl < 0 {
            return Err("reading a variable's creation properties".into());
        }
        let n = H5Pget_nfilters(dcpl);
        let mut filters = Vec::new();
        for i in 0..n.max(0) {
            let (mut flags, mut nelmts, mut config) = (0u32, 0usize, 0u32);
            let id = H5Pget_filter2(
                dcpl,
                i as u32,
                &mut flags,
                &mut nelmts,
                std::ptr::null_mut(),
                0,
                std::ptr::null_mut(),
                &mut config,
            );
            filters.push(id);
        }
        let mut dims = vec![0u64; rank];
        let got = H5Pget_chunk(dcpl, rank as i32, dims.as_mut_ptr());
        H5Pclose(dcpl);
        if got != rank as i32 {
            return Err("a variable is not chunked as defined".into());
        }
        Ok((filters, dims.into_iter().map(|d| d as usize).collect()))
    }
}

fn open_dataset(file: hid_t, name: &str) -> Result<hid_t, String> {
    let cname = CString::new(name).map_err(|_| format!("variable name {name:?}"))?;
    // SAFETY: `file` is an open file id and `cname` a NUL-terminated string that outlives
    // the call.
    let id = unsafe { H5Dopen2(file, cname.as_ptr(), H5P_DEFAULT) };
    if id < 0 { Err(format!("HDF5 could not open variable {name}")) } else { Ok(id) }
}

impl Direct {
    /// Opens the closed NetCDF-4 file `path` in HDF5 and checks that each of `vars` (name,
    /// lengths of the dimensions after time) has the chunk shape one step × … × the last two
    /// dimensions whole, and the filters (shuffle, deflate) when `level` is set, none when
    /// not. Must run on the netCDF thread.
    pub(crate) fn open(
        path: &Path,
        time_var: &str,
        vars: &[(String, Vec<usize>)],
        level: Option<i32>,
    ) -> Result<Self, String> {
        let _lock = netcdf_sys::libnetcdf_lock.lock();
        let cpath = CString::new(path.as_os_str().as_encoded_bytes())
            .map_err(|_| "the output path holds a NUL byte".to_string())?;
        // SAFETY: `cpath` is NUL-terminated and outlives the call.
        let file = unsafe { H5Fopen(cpath.as_ptr(), H5F_ACC_RDWR, H5P_DEFAULT) };
        if file < 0 {
            return Err("HDF5 could not open the new file for writing".into());
        }
        let mut direct =
            Direct { file, vars: Vec::new(), time: -1, time_chunk: 0, times: Vec::new(), level };
        direct.time = open_dataset(file, time_var)?;
        let (_, time_chunk) = layout(direct.time, 1)?;
        direct.time_chunk = time_chunk[0].max(1);
        for (name, shape) in vars {
            let dataset = open_dataset(file, name)?;
            direct.vars.push(DirectVar { name: name.clone(), dataset, shape: shape.clone() });
            let (filters, chunk) = layout(dataset, shape.len() + 1)?;
            let n = shape.len();
            let want: Vec<usize> = std::iter::once(1)
                .chain(shape.iter().enumerate().map(|(i, &l)| if i + 2 >= n { l } else { 1 }))
                .collect();
            if chunk != want {
                return Err(format!("variable {name} has chunks {chunk:?}, not {want:?}"));
            }
            let expected: &[i32] =
                if level.is_some() { &[H5Z_FILTER_SHUFFLE, H5Z_FILTER_DEFLATE] } else { &[] };
            if filters != expected {
                return Err(format!(
                    "variable {name} has filters {filters:?}, not {expected:?} (shuffle = 2, \
                     deflate = 1)"
                ));
            }
        }
        Ok(direct)
    }

    /// The number of chunks of one step of variable `i` and the values each holds.
    pub(crate) fn chunking(&self, i: usize) -> (usize, usize) {
        let s = &self.vars[i].shape;
        let n = s.len();
        let per_chunk: usize = s[n.saturating_sub(2)..].iter().product();
        let chunks: usize = s[..n.saturating_sub(2)].iter().product();
        (chunks, per_chunk)
    }

    /// The name of variable `i` (in the order given to [`Self::open`]).
    pub(crate) fn var_name(&self, i: usize) -> &str {
        &self.vars[i].name
    }

    /// The deflate level.
    pub(crate) fn level(&self) -> Option<i32> {
        self.level
    }

    /// Appends step `t` (the next one): the time value, and for each variable (in the order
    /// given to [`Self::open`]) its encoded chunks in order. Must run on the netCDF thread.
    pub(crate) fn write_step(
        &mut self,
        t: usize,
        time_value: f64,
        chunks: &[Vec<Encoded>],
    ) -> Result<(), String> {
        let _lock = netcdf_sys::libnetcdf_lock.lock();
        if t != self.times.len() || chunks.len() != self.vars.len() {
            return Err("internal: steps out of order or variables missing".into());
        }
        self.times.push(time_value);
        let steps = self.times.len() as u64;
        // SAFETY (every call below): the ids are open datasets of this file; `extent` and
        // `offset` hold one entry per dimension of the dataset; each buffer is as long as
        // the size passed with it and outlives the call.
        for (var, encoded) in self.vars.iter().zip(chunks) {
            let extent: Vec<u64> =
                std::iter::once(steps).chain(var.shape.iter().map(|&l| l as u64)).collect();
            check(unsafe { H5Dset_extent(var.dataset, extent.as_ptr()) }, || {
                format!("extending {} to {steps} steps", var.name)
            })?;
            let n = var.shape.len();
            let outer = &var.shape[..n.saturating_sub(2)];
            for (k, chunk) in encoded.iter().enumerate() {
                // Offset: the step, the chunk's index unravelled over the outer dimensions,
                // then 0 for the two whole dimensions.
                let mut offset = vec![0u64; n + 1];
                offset[0] = t as u64;
                let mut rest = k;
                for (d, &len) in outer.iter().enumerate().rev() {
                    offset[1 + d] = (rest % len) as u64;
                    rest /= len;
                }
                check(
                    unsafe {
                        H5Dwrite_chunk(
                            var.dataset,
                            H5P_DEFAULT,
                            chunk.mask,
                            offset.as_ptr(),
                            chunk.bytes.len(),
                            chunk.bytes.as_ptr().cast(),
                        )
                    },
                    || format!("writing chunk {k} of {} at step {t}", var.name),
                )?;
            }
        }
        // The time coordinate: extend it and rewrite the chunk that holds step t.
        check(unsafe { H5Dset_extent(self.time, [steps].as_ptr()) }, || {
            "extending the time coordinate".into()
        })?;
        let c = t / self.time_chunk;
        let mut values = vec![FILL_F64; self.time_chunk];
        for (i, v) in self.times[c * self.time_chunk..].iter().enumerate() {
            values[i] = *v;
        }
        let bytes: Vec<u8> = values.iter().flat_map(|v| v.to_le_bytes()).collect();
        let offset = [(c * self.time_chunk) as u64];
        check(
            unsafe {
                H5Dwrite_chunk(
                    self.time,
                    H5P_DEFAULT,
                    0,
                    offset.as_ptr(),
                    bytes.len(),
                    bytes.as_ptr().cast(),
                )
            },
            || format!("writing the time coordinate at step {t}"),
        )
    }

    /// Closes every dataset and the file. Must run on the netCDF thread.
    pub(crate) fn close(mut self) -> Result<(), String> {
        self.close_all()
    }

    fn close_all(&mut self) -> Result<(), String> {
        let _lock = netcdf_sys::libnetcdf_lock.lock();
        let mut status = 0;
        // SAFETY: each id is closed once; they are set to -1 after closing.
        unsafe {
            for v in &mut self.vars {
                if v.dataset >= 0 {
                    status = status.min(H5Dclose(v.dataset));
                    v.dataset = -1;
                }
            }
            if self.time >= 0 {
                status = status.min(H5Dclose(self.time));
                self.time = -1;
            }
            if self.file >= 0 {
                status = status.min(H5Fclose(self.file));
                self.file = -1;
            }
        }
        check(status, || "closing the file".into())
    }
}

impl Drop for Direct {
    fn drop(&mut self) {
        let _ = self.close_all();
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn shuffle_groups_bytes_by_position() {
        let v = [f32::from_bits(0x0403_0201), f32::from_bits(0x0807_0605)];
        assert_eq!(shuffle(&v), vec![1, 5, 2, 6, 3, 7, 4, 8]);
    }

    #[test]
    fn encoded_chunks_decode_to_the_input() {
        // zlib stream (RFC 1950: CMF 0x78) of the shuffled bytes; incompressible data is
        // stored raw with both filters marked skipped.
        let values: Vec<f32> = (0..5000).map(|i| 250.0 + (i as f32 * 0.01).sin()).collect();
        let e = encode(&values, Some(1));
        assert_eq!(e.mask, 0);
        assert_eq!(e.bytes[0], 0x78);
        let mut d = libdeflater::Decompressor::new();
        let mut out = vec![0u8; 4 * values.len()];
        let n = d.zlib_decompress(&e.bytes, &mut out).unwrap();
        assert_eq!(n, out.len());
        assert_eq!(out, shuffle(&values));
        let noise: Vec<f32> =
            (0..64u32).map(|i| f32::from_bits(i.wrapping_mul(2_654_435_761) | 1)).collect();
        let e = encode(&noise, Some(1));
        if e.mask != 0 {
            assert_eq!(e.mask, 0b11);
            assert_eq!(e.bytes.len(), 4 * noise.len());
        }
        assert_eq!(
            encode(&values, None),
            Encoded { mask: 0, bytes: values.iter().flat_map(|v| v.to_le_bytes()).collect() }
        );
    }
}

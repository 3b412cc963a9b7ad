//! File format detection and the truncation check for the classic formats.
//!
//! The netCDF-C library reads a truncated classic (CDF-1/2/5) file without complaint: the
//! missing bytes come back as zeros. So the reader parses the classic header itself (a few
//! dozen lines: the format is fixed by the netCDF specification), computes where the last
//! byte of data must lie and refuses a shorter file. A header this parser does not follow is
//! left to the library, which has already accepted it; HDF5-based files (netCDF-4) are
//! checked by HDF5 itself, which refuses a file shorter than its superblock says.

use std::io::Read;
use std::path::Path;

/// What the first bytes of a file say about its format.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Magic {
    /// `CDF\x01`, `CDF\x02` or `CDF\x05`.
    Classic(u8),
    /// HDF5 signature: netCDF-4 (`classic_model` when `_nc3_strict` is present).
    Hdf5 { classic_model: bool },
    /// Anything else.
    Unknown,
}

impl Magic {
    /// The format in words.
    pub(crate) fn name(&self) -> &'static str {
        match self {
            Magic::Classic(1) => "classic",
            Magic::Classic(2) => "64-bit offset",
            Magic::Classic(5) => "64-bit data (CDF-5)",
            Magic::Classic(_) => "classic (unknown version)",
            Magic::Hdf5 { classic_model: true } => "netCDF-4 classic model",
            Magic::Hdf5 { classic_model: false } => "netCDF-4",
            Magic::Unknown => "unknown",
        }
    }
}

const HDF5_SIGNATURE: &[u8; 8] = b"\x89HDF\r\n\x1a\n";

/// Reads the start of the file and tells its format; for classic files also checks that the
/// file is long enough for the data its header describes (`Err(reason)` when it is not).
pub(crate) fn inspect(path: &Path) -> std::io::Result<(Magic, Result<(), String>)> {
    let mut file = std::fs::File::open(path)?;
    let size = file.metadata()?.len();
    let mut head = Vec::new();
    file.by_ref().take(1 << 20).read_to_end(&mut head)?;
    if head.len() >= 4 && &head[..3] == b"CDF" {
        let version = head[3];
        let check = match classic_data_end(&head, version) {
            Some(Ok(end)) if end > size => Err(format!(
                "the file is {size} bytes long but its header places data up to byte {end} \
                 (truncated by {} bytes)",
                end - size
            )),
            Some(Err(HeaderTooShort)) => {
                Err(format!("the file is {size} bytes long, shorter than its own header"))
            }
            _ => Ok(()),
        };
        return Ok((Magic::Classic(version), check));
    }
    let hdf5 = [0usize, 512, 1024, 2048, 4096, 8192]
        .iter()
        .any(|&off| head.len() >= off + 8 && &head[off..off + 8] == HDF5_SIGNATURE);
    if hdf5 {
        let probe = &head[..head.len().min(1 << 16)];
        let classic_model = probe.windows(11).any(|w| w == b"_nc3_strict");
        return Ok((Magic::Hdf5 { classic_model }, Ok(())));
    }
    Ok((Magic::Unknown, Ok(())))
}

/// The header ran past the bytes available.
struct HeaderTooShort;

/// Big-endian cursor over the header.
struct Cursor<'a> {
    buf: &'a [u8],
    pos: usize,
    /// Width of counts and lengths: 4 bytes (CDF-1/2) or 8 (CDF-5).
    wide: bool,
}

impl Cursor<'_> {
    fn bytes(&mut self, n: usize) -> Result<&[u8], HeaderTooShort> {
        let end = self.pos.checked_add(n).ok_or(HeaderTooShort)?;
        let s = self.buf.get(self.pos..end).ok_or(HeaderTooShort)?;
        self.pos = end;
        Ok(s)
    }
    fn u32(&mut self) -> Result<u64, HeaderTooShort> {
        let b = self.bytes(4)?;
        Ok(u64::from(u32::from_be_bytes([b[0], b[1], b[2], b[3]])))
    }
    fn u64(&mut self) -> Result<u64, HeaderTooShort> {
        let b = self.bytes(8)?;
        let mut a = [0u8; 8];
        a.copy_from_slice(b);
        Ok(u64::from_be_bytes(a))
    }
    fn count(&mut self) -> Result<u64, HeaderTooShort> {
        if self.wide { self.u64() } else { self.u32() }
    }
    fn skip_padded(&mut self, n: u64) -> Result<(), HeaderTooShort> {
        let n = usize::try_from(n).map_err(|_| HeaderTooShort)?;
        let padded = n.checked_add(3).ok_or(HeaderTooShort)? / 4 * 4;
        self.bytes(padded).map(|_| ())
    }
    fn name(&mut self) -> Result<(), HeaderTooShort> {
        let n = self.count()?;
        self.skip_padded(n)
    }
    fn attributes(&mut self) -> Result<(), HeaderTooShort> {
        let _tag = self.u32()?;
        let n = self.count()?;
        for _ in 0..n {
            self.name()?;
            let ty = self.u32()?;
            let nelems = self.count()?;
            let size = type_size(ty).ok_or(HeaderTooShort)?;
            self.skip_padded(nelems.checked_mul(size).ok_or(HeaderTooShort)?)?;
        }
        Ok(())
    }
}

fn type_size(ty: u64) -> Option<u64> {
    Some(match ty {
        1 | 2 | 7 => 1,
        3 | 8 => 2,
        4 | 5 | 9 => 4,
        6 | 10 | 11 => 8,
        _ => return None,
    })
}

/// The end offset of the data the header describes. `None` when the header is not one this
/// parser follows (left to the library); `Some(Err)` when it runs past the bytes read.
fn classic_data_end(head: &[u8], version: u8) -> Option<Result<u64, HeaderTooShort>> {
    if !matches!(version, 1 | 2 | 5) {
        return None;
    }
    let mut c = Cursor { buf: head, pos: 4, wide: version == 5 };
    let parsed = (|| -> Result<Option<u64>, HeaderTooShort> {
        let numrecs = c.count()?;
        let streaming = if c.wide { numrecs == u64::MAX } else { numrecs == u64::from(u32::MAX) };
        // Dimensions.
        let _tag = c.u32()?;
        let ndims = c.count()?;
        let mut dims = Vec::new();
        for _ in 0..ndims {
            c.name()?;
            dims.push(c.count()?);
        }
        c.attributes()?;
        // Variables.
        let _tag = c.u32()?;
        let nvars = c.count()?;
        struct Var {
            begin: u64,
            record: bool,
            bytes: u64,
        }
        let mut vars = Vec::new();
        for _ in 0..nvars {
            c.name()?;
            let nd = c.count()?;
            let mut ids = Vec::new();
            for _ in 0..nd {
                ids.push(c.count()?);
            }
            c.attributes()?;
            let ty = c.u32()?;
            let _vsize = c.count()?;
            let begin = if version == 1 { c.u32()? } else { c.u64()? };
            let size = type_size(ty).ok_or(HeaderTooShort)?;
            let mut record = false;
            let mut bytes = size;
            for (k, id) in ids.iter().enumerate() {
                let len = *dims
                    .get(usize::try_from(*id).map_err(|_| HeaderTooShort)?)
                    .ok_or(HeaderTooShort)?;
                if k == 0 && len == 0 {
                    record = true;
                } else {
                    bytes = bytes.checked_mul(len).ok_or(HeaderTooShort)?;
                }
            }
            vars.push(Var { begin, record, bytes });
        }
        let n_rec = vars.iter().filter(|v| v.record).count();
        let recsize: u64 = if n_rec == 1 {
            vars.iter().filter(|v| v.record).map(|v| v.bytes).sum()
        } else {
            vars.iter().filter(|v| v.record).map(|v| v.bytes.div_ceil(4) * 4).sum()
        };
        let mut end = c.pos as u64;
        for v in &vars {
            let e = if v.record {
                if streaming || numrecs == 0 {
                    continue;
                }
                v.begin
                    .checked_add((numrecs - 1).checked_mul(recsize).ok_or(HeaderTooShort)?)
                    .and_then(|x| x.checked_add(v.bytes))
                    .ok_or(HeaderTooShort)?
            } else {
                v.begin.checked_add(v.bytes).ok_or(HeaderTooShort)?
            };
            end = end.max(e);
        }
        Ok(Some(end))
    })();
    match parsed {
        Ok(Some(end)) => Some(Ok(end)),
        Ok(None) => None,
        Err(e) => {
            // Only call the header short when the whole file was read: a longer header than
            // the 1 MiB read would otherwise look truncated.
            if head.len() < (1 << 20) { Some(Err(e)) } else { None }
        }
    }
}

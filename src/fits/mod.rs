//! A small FITS reader and writer (FITS Standard 4.0): header units, image arrays and
//! the single-row binary tables that the WCS lookup-table convention uses.
//!
//! Why by hand: the fitsrs crate decodes pixels through element iterators, cannot seek
//! to a block of rows of one band, does not apply BSCALE/BZERO/BLANK, stops silently on
//! a read error and cannot write. thiomap needs random access to row blocks (a FITS cube
//! is stored band by band, so a block of rows is one contiguous run per band), parallel
//! positioned reads, a size check against the file before any allocation, and a writer.
//! All of that is a few hundred lines over the standard's simple byte layout.
//!
//! `.fits.gz` files are inflated whole into memory once (a gzip stream cannot be read at
//! an offset); plain files are read with positioned reads and never loaded whole.
//!
//! This module knows bytes and cards only; what a cube is lives in [`crate::cube`].

pub mod header;
pub mod image;
pub mod write;

use std::fs::File;
use std::io::{self, Read};
use std::path::Path;

use header::{parse_card, Header, BLOCK_LEN, CARD_LEN};

/// What can go wrong reading FITS bytes. The cube layer adds the file's path.
#[derive(Debug, thiserror::Error)]
pub enum FitsError {
    #[error("{0}")]
    Io(#[from] io::Error),
    #[error("{0}")]
    Malformed(String),
}

fn malformed(msg: impl Into<String>) -> FitsError {
    FitsError::Malformed(msg.into())
}

/// Random-access bytes of a FITS file: a plain file read at offsets, or a gzip file
/// inflated into memory.
pub enum Source {
    File { file: File, len: u64 },
    Memory(Vec<u8>),
}

/// Deflate cannot expand data by more than about 1032:1, so a gzip file cannot hold
/// more than this many times its own size; used to refuse absurd headers early.
pub const MAX_DEFLATE_RATIO: u64 = 1032;

impl Source {
    /// Opens a FITS file; gzip is recognised by its magic bytes, not by the name.
    pub fn open(path: &Path) -> Result<Source, FitsError> {
        let mut file = File::open(path)?;
        let len = file.metadata()?.len();
        let mut magic = [0u8; 2];
        let is_gzip = len >= 2 && {
            file.read_exact(&mut magic)?;
            magic == [0x1f, 0x8b]
        };
        if is_gzip {
            let file = File::open(path)?;
            let mut decoder = flate2::read::MultiGzDecoder::new(io::BufReader::new(file));
            let mut bytes = Vec::new();
            decoder
                .read_to_end(&mut bytes)
                .map_err(|e| malformed(format!("the gzip stream is damaged ({e})")))?;
            Ok(Source::Memory(bytes))
        } else {
            Ok(Source::File { file, len })
        }
    }

    pub fn len(&self) -> u64 {
        match self {
            Source::File { len, .. } => *len,
            Source::Memory(bytes) => bytes.len() as u64,
        }
    }

    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Fills `buf` from `offset`; safe to call from several threads at once.
    pub fn read_exact_at(&self, offset: u64, buf: &mut [u8]) -> io::Result<()> {
        match self {
            Source::File { file, .. } => {
                use std::os::unix::fs::FileExt;
                file.read_exact_at(buf, offset)
            }
            Source::Memory(bytes) => {
                let start = usize::try_from(offset).map_err(|_| io::ErrorKind::UnexpectedEof)?;
                let end = start
                    .checked_add(buf.len())
                    .filter(|&e| e <= bytes.len())
                    .ok_or(io::ErrorKind::UnexpectedEof)?;
                buf.copy_from_slice(&bytes[start..end]);
                Ok(())
            }
        }
    }
}

/// The element type of a data array (BITPIX).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Bitpix {
    U8,
    I16,
    I32,
    I64,
    F32,
    F64,
}

impl Bitpix {
    pub fn from_code(code: i64) -> Option<Bitpix> {
        Some(match code {
            8 => Bitpix::U8,
            16 => Bitpix::I16,
            32 => Bitpix::I32,
            64 => Bitpix::I64,
            -32 => Bitpix::F32,
            -64 => Bitpix::F64,
            _ => return None,
        })
    }

    pub fn bytes(self) -> usize {
        match self {
            Bitpix::U8 => 1,
            Bitpix::I16 => 2,
            Bitpix::I32 | Bitpix::F32 => 4,
            Bitpix::I64 | Bitpix::F64 => 8,
        }
    }

    pub fn is_integer(self) -> bool {
        !matches!(self, Bitpix::F32 | Bitpix::F64)
    }
}

/// The kind of a header-data unit.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum HduKind {
    Primary,
    Image,
    BinTable,
    Other,
}

/// One header-data unit: its header and where its data lie.
#[derive(Debug, Clone)]
pub struct Hdu {
    /// 0 for the primary HDU, then 1, 2, … for extensions.
    pub index: usize,
    pub kind: HduKind,
    pub header: Header,
    /// Byte offset of the first data byte.
    pub data_start: u64,
    /// Data bytes the header declares, without padding.
    pub data_len: u64,
}

impl Hdu {
    /// EXTNAME, upper-cased; the primary HDU has `PRIMARY` when it has no EXTNAME.
    pub fn name(&self) -> Option<String> {
        match self.header.str("EXTNAME") {
            Some(n) => Some(n.trim().to_ascii_uppercase()),
            None if self.index == 0 => Some("PRIMARY".into()),
            None => None,
        }
    }

    /// The axis lengths NAXIS1, NAXIS2, …
    pub fn axes(&self) -> Vec<u64> {
        let n = self.header.i64("NAXIS").unwrap_or(0).max(0);
        (1..=n)
            .map(|i| self.header.i64(&format!("NAXIS{i}")).unwrap_or(0).max(0) as u64)
            .collect()
    }

    /// Checks that the file holds every data byte this HDU declares.
    pub fn check_within(&self, file_len: u64) -> Result<(), FitsError> {
        let end = self.data_start.saturating_add(self.data_len);
        if end > file_len {
            return Err(malformed(format!(
                "HDU {} declares {} data bytes but the file ends {} bytes short \
                 (truncated file, or a header that claims more data than the file holds)",
                self.index,
                self.data_len,
                end - file_len
            )));
        }
        Ok(())
    }
}

/// Reads every header of the file and where each data unit lies, reading no data.
/// Scanning stops quietly at trailing bytes that do not start a new extension.
pub fn scan(src: &Source) -> Result<Vec<Hdu>, FitsError> {
    let len = src.len();
    let mut hdus = Vec::new();
    let mut offset = 0u64;
    while offset + BLOCK_LEN as u64 <= len {
        let index = hdus.len();
        let Some((header, data_start)) = read_header(src, offset, len, index)? else {
            break;
        };
        let kind = hdu_kind(&header, index)?;
        let data_len = data_bytes(&header)?;
        let padded = data_len.div_ceil(BLOCK_LEN as u64) * BLOCK_LEN as u64;
        hdus.push(Hdu {
            index,
            kind,
            header,
            data_start,
            data_len,
        });
        offset = data_start.saturating_add(padded);
    }
    if hdus.is_empty() {
        return Err(malformed(if len < BLOCK_LEN as u64 {
            format!("the file is {len} bytes long, shorter than one FITS header block (2880 bytes)")
        } else {
            "the file does not start with a FITS header".to_string()
        }));
    }
    Ok(hdus)
}

/// Reads one header from `offset`; `None` when the bytes there do not start an HDU.
fn read_header(
    src: &Source,
    offset: u64,
    len: u64,
    index: usize,
) -> Result<Option<(Header, u64)>, FitsError> {
    let mut header = Header::default();
    let mut block = vec![0u8; BLOCK_LEN];
    let mut pos = offset;
    loop {
        if pos + BLOCK_LEN as u64 > len {
            return Err(malformed(format!(
                "header of HDU {index} has no END card before the end of the file"
            )));
        }
        src.read_exact_at(pos, &mut block)?;
        if pos == offset {
            let first = &block[..8];
            let ok = if index == 0 {
                first == b"SIMPLE  "
            } else {
                first == b"XTENSION"
            };
            if !ok {
                if index == 0 {
                    return Err(malformed("the file does not start with SIMPLE = T"));
                }
                return Ok(None);
            }
        }
        pos += BLOCK_LEN as u64;
        for raw in block.chunks_exact(CARD_LEN) {
            if &raw[..8] == b"END     " {
                return Ok(Some((header, pos)));
            }
            let card = parse_card(raw).map_err(|why| malformed(format!("HDU {index}: {why}")))?;
            header.cards.push(card);
        }
    }
}

fn hdu_kind(header: &Header, index: usize) -> Result<HduKind, FitsError> {
    if index == 0 {
        if header.get("SIMPLE") != Some(&header::Value::Logical(true)) {
            return Err(malformed(
                "SIMPLE is not T: the file does not conform to FITS",
            ));
        }
        return Ok(HduKind::Primary);
    }
    Ok(match header.str("XTENSION").map(str::trim) {
        Some("IMAGE") => HduKind::Image,
        Some("BINTABLE") => HduKind::BinTable,
        _ => HduKind::Other,
    })
}

/// Data bytes declared by a header: |BITPIX|/8 × GCOUNT × (PCOUNT + NAXIS1 × … × NAXISn).
fn data_bytes(header: &Header) -> Result<u64, FitsError> {
    let bitpix = header
        .i64("BITPIX")
        .ok_or_else(|| malformed("BITPIX is missing"))?;
    let naxis = header
        .i64("NAXIS")
        .ok_or_else(|| malformed("NAXIS is missing"))?;
    if !(0..=999).contains(&naxis) {
        return Err(malformed(format!("NAXIS = {naxis} is outside 0–999")));
    }
    if naxis == 0 {
        return Ok(0);
    }
    let mut count: u64 = 1;
    for i in 1..=naxis {
        let n = header
            .i64(&format!("NAXIS{i}"))
            .ok_or_else(|| malformed(format!("NAXIS{i} is missing")))?;
        let n = u64::try_from(n).map_err(|_| malformed(format!("NAXIS{i} = {n} is negative")))?;
        count = count
            .checked_mul(n)
            .ok_or_else(|| malformed("the axis lengths overflow 64 bits"))?;
    }
    let pcount = header.i64("PCOUNT").unwrap_or(0).max(0) as u64;
    let gcount = header.i64("GCOUNT").unwrap_or(1).max(0) as u64;
    let elem = bitpix.unsigned_abs() / 8;
    count
        .checked_add(pcount)
        .and_then(|c| c.checked_mul(gcount))
        .and_then(|c| c.checked_mul(elem))
        .ok_or_else(|| malformed("the declared data size overflows 64 bits"))
}

/// How raw array values become physical ones: BLANK on the raw integers first, then
/// physical = BZERO + BSCALE × raw (FITS Standard 4.0, 5.3).
#[derive(Debug, Clone, Copy)]
pub struct Scaling {
    pub bitpix: Bitpix,
    pub bscale: f64,
    pub bzero: f64,
    pub blank: Option<i64>,
}

impl Scaling {
    pub fn from_header(header: &Header) -> Result<Scaling, FitsError> {
        let code = header
            .i64("BITPIX")
            .ok_or_else(|| malformed("BITPIX is missing"))?;
        let bitpix = Bitpix::from_code(code).ok_or_else(|| {
            malformed(format!(
                "BITPIX = {code} is not supported (expected 8, 16, 32, 64, -32 or -64)"
            ))
        })?;
        let bscale = header.f64("BSCALE").unwrap_or(1.0);
        let bzero = header.f64("BZERO").unwrap_or(0.0);
        if bscale == 0.0 || !bscale.is_finite() || !bzero.is_finite() {
            return Err(malformed(format!(
                "BSCALE = {bscale}, BZERO = {bzero}: scaling must be finite and BSCALE non-zero"
            )));
        }
        let blank = if bitpix.is_integer() {
            header.i64("BLANK")
        } else {
            None
        };
        Ok(Scaling {
            bitpix,
            bscale,
            bzero,
            blank,
        })
    }

    fn is_identity(&self) -> bool {
        self.bscale == 1.0 && self.bzero == 0.0
    }

    /// Decodes big-endian raw bytes into physical f32 values; `out.len()` values.
    pub fn decode(&self, raw: &[u8], out: &mut [f32]) {
        let n = self.bitpix.bytes();
        debug_assert_eq!(raw.len(), out.len() * n);
        let (s, z, blank) = (self.bscale, self.bzero, self.blank);
        let int = |v: i64, out: &mut f32| {
            *out = if Some(v) == blank {
                f32::NAN
            } else {
                (z + s * v as f64) as f32
            };
        };
        match self.bitpix {
            Bitpix::F32 if self.is_identity() => {
                for (o, c) in out.iter_mut().zip(raw.chunks_exact(4)) {
                    *o = f32::from_be_bytes([c[0], c[1], c[2], c[3]]);
                }
            }
            Bitpix::F32 => {
                for (o, c) in out.iter_mut().zip(raw.chunks_exact(4)) {
                    let v = f32::from_be_bytes([c[0], c[1], c[2], c[3]]);
                    *o = (z + s * v as f64) as f32;
                }
            }
            Bitpix::F64 => {
                for (o, c) in out.iter_mut().zip(raw.chunks_exact(8)) {
                    let v = f64::from_be_bytes(c.try_into().expect("8-byte chunk"));
                    *o = (z + s * v) as f32;
                }
            }
            Bitpix::U8 => raw
                .iter()
                .zip(out.iter_mut())
                .for_each(|(&b, o)| int(b as i64, o)),
            Bitpix::I16 => {
                for (o, c) in out.iter_mut().zip(raw.chunks_exact(2)) {
                    int(i16::from_be_bytes([c[0], c[1]]) as i64, o);
                }
            }
            Bitpix::I32 => {
                for (o, c) in out.iter_mut().zip(raw.chunks_exact(4)) {
                    int(i32::from_be_bytes([c[0], c[1], c[2], c[3]]) as i64, o);
                }
            }
            Bitpix::I64 => {
                for (o, c) in out.iter_mut().zip(raw.chunks_exact(8)) {
                    int(i64::from_be_bytes(c.try_into().expect("8-byte chunk")), o);
                }
            }
        }
    }
}

/// Reads `out.len()` consecutive array elements starting at element `first` of an
/// image HDU, applying the scaling.
pub fn read_elements(
    src: &Source,
    hdu: &Hdu,
    scaling: &Scaling,
    first: u64,
    out: &mut [f32],
    scratch: &mut Vec<u8>,
) -> Result<(), FitsError> {
    let n = scaling.bitpix.bytes();
    scratch.resize(out.len() * n, 0);
    src.read_exact_at(hdu.data_start + first * n as u64, scratch)?;
    scaling.decode(scratch, out);
    Ok(())
}

/// One column of a binary table, read as f64 over all rows (an array column gives all
/// its elements, row after row). Numeric column types only.
pub struct Column {
    pub values: Vec<f64>,
    pub unit: Option<String>,
}

/// Reads the named column of a binary-table HDU.
pub fn read_table_column(src: &Source, hdu: &Hdu, name: &str) -> Result<Column, FitsError> {
    let h = &hdu.header;
    let fields = h.i64("TFIELDS").unwrap_or(0).max(0);
    let row_len = h.i64("NAXIS1").unwrap_or(0).max(0) as u64;
    let rows = h.i64("NAXIS2").unwrap_or(0).max(0) as u64;
    let mut offset_in_row = 0u64;
    for i in 1..=fields {
        let tform = h
            .str(&format!("TFORM{i}"))
            .ok_or_else(|| malformed(format!("binary table: TFORM{i} is missing")))?;
        let (repeat, code) = parse_tform(tform)?;
        let width = tform_width(code, repeat)?;
        let ttype = h.str(&format!("TTYPE{i}")).unwrap_or("").trim();
        if ttype.eq_ignore_ascii_case(name) {
            let elem: u64 = match code {
                'B' => 1,
                'I' => 2,
                'J' | 'E' => 4,
                'K' | 'D' => 8,
                _ => {
                    return Err(malformed(format!(
                        "binary table column {name} has type {code}, not a number"
                    )))
                }
            };
            if offset_in_row + width > row_len {
                return Err(malformed("binary table columns are wider than NAXIS1"));
            }
            hdu.check_within(src.len())?;
            let mut values = Vec::with_capacity((repeat * rows) as usize);
            let mut buf = vec![0u8; width as usize];
            for r in 0..rows {
                src.read_exact_at(hdu.data_start + r * row_len + offset_in_row, &mut buf)?;
                for c in buf.chunks_exact(elem as usize) {
                    values.push(match code {
                        'B' => c[0] as f64,
                        'I' => i16::from_be_bytes([c[0], c[1]]) as f64,
                        'J' => i32::from_be_bytes([c[0], c[1], c[2], c[3]]) as f64,
                        'K' => i64::from_be_bytes(c.try_into().expect("8 bytes")) as f64,
                        'E' => f32::from_be_bytes([c[0], c[1], c[2], c[3]]) as f64,
                        _ => f64::from_be_bytes(c.try_into().expect("8 bytes")),
                    });
                }
            }
            let unit = h
                .str(&format!("TUNIT{i}"))
                .map(|u| u.trim().to_string())
                .filter(|u| !u.is_empty());
            return Ok(Column { values, unit });
        }
        offset_in_row += width;
    }
    Err(malformed(format!(
        "binary table has no column named {name}"
    )))
}

/// Splits a TFORM value such as `96D` into repeat count and type code.
fn parse_tform(tform: &str) -> Result<(u64, char), FitsError> {
    let t = tform.trim();
    let digits: String = t.chars().take_while(|c| c.is_ascii_digit()).collect();
    let code = t[digits.len()..]
        .chars()
        .next()
        .ok_or_else(|| malformed(format!("TFORM '{t}' has no type code")))?;
    let repeat = if digits.is_empty() {
        1
    } else {
        digits
            .parse()
            .map_err(|_| malformed(format!("TFORM '{t}' has a bad repeat count")))?
    };
    Ok((repeat, code))
}

fn tform_width(code: char, repeat: u64) -> Result<u64, FitsError> {
    let w = match code {
        'L' | 'B' | 'A' => repeat,
        'X' => repeat.div_ceil(8),
        'I' => 2 * repeat,
        'J' | 'E' => 4 * repeat,
        'K' | 'D' | 'C' | 'P' => 8 * repeat,
        'M' | 'Q' => 16 * repeat,
        other => return Err(malformed(format!("unknown binary table type code {other}"))),
    };
    Ok(w)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn blank_applies_to_raw_integers_before_scaling() {
        // FITS Standard 4.0, 5.3: BLANK is compared with the stored integer.
        let s = Scaling {
            bitpix: Bitpix::I16,
            bscale: 2.0,
            bzero: 10.0,
            blank: Some(-1),
        };
        let raw: Vec<u8> = [-1i16, 3].iter().flat_map(|v| v.to_be_bytes()).collect();
        let mut out = [0f32; 2];
        s.decode(&raw, &mut out);
        assert!(out[0].is_nan());
        assert_eq!(out[1], 16.0);
    }

    #[test]
    fn unsigned_16_bit_is_signed_with_bzero_32768() {
        // FITS Standard 4.0, table 11: unsigned 16-bit integers are stored with BZERO = 32768.
        let s = Scaling {
            bitpix: Bitpix::I16,
            bscale: 1.0,
            bzero: 32768.0,
            blank: None,
        };
        let raw: Vec<u8> = [i16::MIN, -1, i16::MAX]
            .iter()
            .flat_map(|v| v.to_be_bytes())
            .collect();
        let mut out = [0f32; 3];
        s.decode(&raw, &mut out);
        assert_eq!(out, [0.0, 32767.0, 65535.0]);
    }

    #[test]
    fn tform_codes_give_widths() {
        assert_eq!(parse_tform("96D").unwrap(), (96, 'D'));
        assert_eq!(parse_tform("E").unwrap(), (1, 'E'));
        assert_eq!(tform_width('D', 96).unwrap(), 768);
        assert!(parse_tform("").is_err());
    }
}

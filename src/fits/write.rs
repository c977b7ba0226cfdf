//! Writes FITS files: a primary image (a cube or a plane), image extensions and
//! one-row binary tables (for the WCS lookup-table convention), big-endian, in
//! 2880-byte blocks of 80-character cards (FITS Standard 4.0, sections 3–7).
//!
//! The writer streams to any `Write`; atomicity (temporary name, then rename) is the
//! caller's job, see [`crate::atomic`].

use std::io::{self, Write};

use ndarray::{ArrayView2, ArrayView3};

use super::header::{format_card, Card, Value, BLOCK_LEN};

/// Image data, in thiomap's internal order; the writer turns it into FITS axis order
/// (x fastest, then y, then band).
pub enum ImageData<'a> {
    /// Pixel-interleaved (row, column, band) samples, written as NAXIS1 = columns,
    /// NAXIS2 = rows, NAXIS3 = bands.
    Cube(ArrayView3<'a, f32>),
    /// A (row, column) plane of f32.
    Plane(ArrayView2<'a, f32>),
    /// A (row, column) plane of int16 labels.
    Labels(ArrayView2<'a, i16>),
    /// A (row, column) plane of uint8 bits (BITPIX 8, FITS's unsigned byte).
    Bits(ArrayView2<'a, u8>),
}

impl ImageData<'_> {
    fn bitpix(&self) -> i64 {
        match self {
            ImageData::Labels(_) => 16,
            ImageData::Bits(_) => 8,
            _ => -32,
        }
    }

    /// NAXIS1, NAXIS2, … in FITS order.
    fn axes(&self) -> Vec<usize> {
        match self {
            ImageData::Cube(a) => vec![a.dim().1, a.dim().0, a.dim().2],
            ImageData::Plane(a) => vec![a.dim().1, a.dim().0],
            ImageData::Labels(a) => vec![a.dim().1, a.dim().0],
            ImageData::Bits(a) => vec![a.dim().1, a.dim().0],
        }
    }

    fn byte_len(&self) -> usize {
        self.axes().iter().product::<usize>() * (self.bitpix().unsigned_abs() as usize / 8)
    }

    /// Streams the samples big-endian, one band plane at a time (one plane of memory); a
    /// plane is gathered from the (row, col, band) samples row by row in parallel.
    fn write_data<W: Write>(&self, w: &mut W) -> io::Result<()> {
        use rayon::prelude::*;
        match self {
            ImageData::Cube(cube) => {
                let (rows, cols, bands) = cube.dim();
                let mut buf = vec![0u8; rows * cols * 4];
                for b in 0..bands {
                    let plane = cube.index_axis(ndarray::Axis(2), b);
                    buf.par_chunks_mut((cols * 4).max(1))
                        .zip(plane.axis_iter(ndarray::Axis(0)).into_par_iter())
                        .for_each(|(out, line)| {
                            for (o, v) in out.chunks_exact_mut(4).zip(line.iter()) {
                                o.copy_from_slice(&v.to_be_bytes());
                            }
                        });
                    w.write_all(&buf)?;
                }
            }
            ImageData::Plane(p) => {
                let buf: Vec<u8> = p.iter().flat_map(|v| v.to_be_bytes()).collect();
                w.write_all(&buf)?;
            }
            ImageData::Labels(p) => {
                let buf: Vec<u8> = p.iter().flat_map(|v| v.to_be_bytes()).collect();
                w.write_all(&buf)?;
            }
            ImageData::Bits(p) => {
                let buf: Vec<u8> = p.iter().copied().collect();
                w.write_all(&buf)?;
            }
        }
        Ok(())
    }
}

/// An image HDU: data plus the cards that describe it (EXTNAME, WCS, plane names).
pub struct ImageHdu<'a> {
    pub data: ImageData<'a>,
    pub cards: Vec<Card>,
}

/// A column of a one-row binary table: all values in one array cell, as f64 (TFORM nD).
pub struct TableColumn {
    pub name: String,
    pub unit: String,
    pub values: Vec<f64>,
}

/// A binary table of one row, as the WCS lookup-table convention stores coordinate
/// arrays (Greisen et al. 2006, FITS WCS Paper III, section 6.1.2).
pub struct TableHdu {
    pub extname: String,
    pub columns: Vec<TableColumn>,
}

pub enum Extension<'a> {
    Image(ImageHdu<'a>),
    Table(TableHdu),
}

/// Writes a whole FITS file.
pub fn write_fits<W: Write>(
    w: &mut W,
    primary: &ImageHdu,
    extensions: &[Extension],
) -> io::Result<()> {
    let mut cards = vec![
        Card::new(
            "SIMPLE",
            Value::Logical(true),
            "conforms to FITS Standard 4.0",
        ),
        Card::new("BITPIX", Value::Integer(primary.data.bitpix()), ""),
    ];
    push_axes(&mut cards, &primary.data.axes());
    cards.push(Card::new(
        "EXTEND",
        Value::Logical(!extensions.is_empty()),
        "",
    ));
    cards.extend(primary.cards.iter().cloned());
    write_header(w, &cards)?;
    primary.data.write_data(w)?;
    pad(w, primary.data.byte_len(), 0)?;

    for ext in extensions {
        match ext {
            Extension::Image(hdu) => {
                let mut cards = vec![
                    Card::new("XTENSION", Value::Text("IMAGE".into()), "image extension"),
                    Card::new("BITPIX", Value::Integer(hdu.data.bitpix()), ""),
                ];
                push_axes(&mut cards, &hdu.data.axes());
                cards.push(Card::new("PCOUNT", Value::Integer(0), ""));
                cards.push(Card::new("GCOUNT", Value::Integer(1), ""));
                cards.extend(hdu.cards.iter().cloned());
                write_header(w, &cards)?;
                hdu.data.write_data(w)?;
                pad(w, hdu.data.byte_len(), 0)?;
            }
            Extension::Table(table) => write_table(w, table)?,
        }
    }
    w.flush()
}

fn push_axes(cards: &mut Vec<Card>, axes: &[usize]) {
    cards.push(Card::new("NAXIS", Value::Integer(axes.len() as i64), ""));
    for (i, n) in axes.iter().enumerate() {
        cards.push(Card::new(
            &format!("NAXIS{}", i + 1),
            Value::Integer(*n as i64),
            "",
        ));
    }
}

fn write_table<W: Write>(w: &mut W, table: &TableHdu) -> io::Result<()> {
    let row_len: usize = table.columns.iter().map(|c| 8 * c.values.len()).sum();
    let mut cards = vec![
        Card::new("XTENSION", Value::Text("BINTABLE".into()), "binary table"),
        Card::new("BITPIX", Value::Integer(8), ""),
        Card::new("NAXIS", Value::Integer(2), ""),
        Card::new("NAXIS1", Value::Integer(row_len as i64), "bytes per row"),
        Card::new("NAXIS2", Value::Integer(1), "one row"),
        Card::new("PCOUNT", Value::Integer(0), ""),
        Card::new("GCOUNT", Value::Integer(1), ""),
        Card::new("TFIELDS", Value::Integer(table.columns.len() as i64), ""),
    ];
    for (i, c) in table.columns.iter().enumerate() {
        let n = i + 1;
        cards.push(Card::new(
            &format!("TTYPE{n}"),
            Value::Text(c.name.clone()),
            "",
        ));
        cards.push(Card::new(
            &format!("TFORM{n}"),
            Value::Text(format!("{}D", c.values.len())),
            "",
        ));
        if !c.unit.is_empty() {
            cards.push(Card::new(
                &format!("TUNIT{n}"),
                Value::Text(c.unit.clone()),
                "",
            ));
        }
    }
    cards.push(Card::new("EXTNAME", Value::Text(table.extname.clone()), ""));
    write_header(w, &cards)?;
    let mut bytes = Vec::with_capacity(row_len);
    for c in &table.columns {
        for v in &c.values {
            bytes.extend_from_slice(&v.to_be_bytes());
        }
    }
    w.write_all(&bytes)?;
    pad(w, row_len, 0)
}

fn write_header<W: Write>(w: &mut W, cards: &[Card]) -> io::Result<()> {
    let mut text = String::with_capacity((cards.len() + 1) * 80);
    for c in cards {
        text.push_str(&format_card(c));
    }
    text.push_str(&format!("{:<80}", "END"));
    w.write_all(text.as_bytes())?;
    pad(w, text.len(), b' ')
}

fn pad<W: Write>(w: &mut W, written: usize, fill: u8) -> io::Result<()> {
    let rest = (BLOCK_LEN - written % BLOCK_LEN) % BLOCK_LEN;
    w.write_all(&vec![fill; rest])
}

/// Writes a FITS file atomically; a name ending in `.gz` is gzip-compressed (with a zero
/// timestamp, so reruns are byte-identical).
pub fn write_file(
    path: &std::path::Path,
    primary: &ImageHdu,
    extensions: &[Extension],
) -> Result<(), crate::atomic::WriteError> {
    let gz = path
        .extension()
        .is_some_and(|e| e.eq_ignore_ascii_case("gz"));
    crate::atomic::write_with(path, |file| {
        let buffered = io::BufWriter::with_capacity(1 << 20, file);
        if gz {
            let mut enc = flate2::GzBuilder::new()
                .mtime(0)
                .write(buffered, flate2::Compression::default());
            write_fits(&mut enc, primary, extensions)?;
            enc.finish()?.flush()
        } else {
            let mut w = buffered;
            write_fits(&mut w, primary, extensions)
        }
    })
}

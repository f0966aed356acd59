//! The multi-order sky map as a FITS binary table: columns `UNIQ` (64-bit
//! integer, NUNIQ index 4 * 4^order + ipix) and `PROBDENSITY` (64-bit float,
//! probability per steradian), with the HEALPix keywords of the multi-order
//! convention (`PIXTYPE = 'HEALPIX'`, `ORDERING = 'NUNIQ'`, `COORDSYS = 'C'`,
//! `MOCORDER`, `INDXSCHM = 'EXPLICIT'`).
//!
//! Written by hand: cdshealpix and moc write single-order maps and MOCs but
//! not this table; the FITS layout (Pence et al. 2010, A&A 524, A42: 2880-byte
//! blocks of 80-character header cards, big-endian data) takes a page.

use super::Leaf;

const BLOCK: usize = 2880;

fn card(out: &mut Vec<u8>, key: &str, value: &str, comment: &str) {
    let mut text = if value.is_empty() { format!("{key:<8}") } else { format!("{key:<8}= {value:>20}") };
    if !comment.is_empty() {
        text.push_str(" / ");
        text.push_str(comment);
    }
    text.truncate(80);
    out.extend_from_slice(format!("{text:<80}").as_bytes());
}

fn string(v: &str) -> String {
    format!("{:<20}", format!("'{v:<8}'"))
}

fn pad(out: &mut Vec<u8>, byte: u8) {
    while out.len() % BLOCK != 0 {
        out.push(byte);
    }
}

/// The FITS file of a multi-order map (leaves with zero probability are
/// kept, so the table tiles the sky).
pub fn multi_order_map(leaves: &[Leaf], extra: &[(&str, String, &str)]) -> Vec<u8> {
    let mut out = Vec::new();
    card(&mut out, "SIMPLE", "T", "conforms to FITS");
    card(&mut out, "BITPIX", "8", "");
    card(&mut out, "NAXIS", "0", "no image in the primary HDU");
    card(&mut out, "EXTEND", "T", "");
    card(&mut out, "END", "", "");
    pad(&mut out, b' ');

    let max_order = leaves.iter().map(|l| l.order).max().unwrap_or(0);
    card(&mut out, "XTENSION", &string("BINTABLE"), "binary table");
    card(&mut out, "BITPIX", "8", "");
    card(&mut out, "NAXIS", "2", "");
    card(&mut out, "NAXIS1", "16", "bytes per row");
    card(&mut out, "NAXIS2", &leaves.len().to_string(), "rows");
    card(&mut out, "PCOUNT", "0", "");
    card(&mut out, "GCOUNT", "1", "");
    card(&mut out, "TFIELDS", "2", "");
    card(&mut out, "TTYPE1", &string("UNIQ"), "NUNIQ index 4*4^order+ipix");
    card(&mut out, "TFORM1", &string("K"), "");
    card(&mut out, "TTYPE2", &string("PROBDENSITY"), "probability per steradian");
    card(&mut out, "TFORM2", &string("D"), "");
    card(&mut out, "TUNIT2", &string("sr-1"), "");
    card(&mut out, "PIXTYPE", &string("HEALPIX"), "");
    card(&mut out, "ORDERING", &string("NUNIQ"), "");
    card(&mut out, "COORDSYS", &string("C"), "equatorial (ICRS)");
    card(&mut out, "MOCORDER", &max_order.to_string(), "finest order");
    card(&mut out, "INDXSCHM", &string("EXPLICIT"), "");
    for (k, v, c) in extra {
        card(&mut out, k, v, c);
    }
    card(&mut out, "END", "", "");
    pad(&mut out, b' ');
    for l in leaves {
        out.extend_from_slice(&(l.uniq() as i64).to_be_bytes());
        out.extend_from_slice(&l.density().to_be_bytes());
    }
    pad(&mut out, 0);
    out
}

/// A quoted FITS string value, for [`multi_order_map`]'s extra cards.
pub fn fits_string(v: &str) -> String {
    string(v)
}

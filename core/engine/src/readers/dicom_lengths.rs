//! A check of every declared length in a DICOM Part 10 file against the bytes that follow,
//! before the file is decoded. A decoder allocates the declared length of a value before it
//! reads it, so a small hostile file declaring gigabytes would otherwise take that memory.
//!
//! The walk follows the data element encoding of DICOM PS3.5 section 7: a tag (group, element),
//! in explicit VR syntaxes a two-letter VR with a 2-byte length, or 2 reserved bytes and a
//! 4-byte length for OB, OD, OF, OL, OV, OW, SQ, SV, UC, UN, UR, UT and UV; in implicit VR a
//! 4-byte length. Items (FFFE,E000) and the item and sequence delimiters (FFFE,E00D),
//! (FFFE,E0DD) always carry a 4-byte length. A length of FFFFFFFF is undefined: the value is a
//! sequence of items (or encapsulated pixel data fragments) ended by a sequence delimiter
//! (section 7.5). The file meta group is always explicit VR little endian (PS3.10 7.1).

/// Undefined length (PS3.5 7.1.1).
const UNDEFINED: u32 = 0xFFFF_FFFF;
const ITEM: (u16, u16) = (0xFFFE, 0xE000);
const ITEM_END: (u16, u16) = (0xFFFE, 0xE00D);
const SEQUENCE_END: (u16, u16) = (0xFFFE, 0xE0DD);
/// Deepest nesting of sequences walked.
const MAX_NESTING: usize = 32;

/// How the data set after the file meta group is encoded.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Encoding {
    ImplicitLittle,
    ExplicitLittle,
    ExplicitBig,
}

impl Encoding {
    /// The encoding of a transfer syntax UID; `None` for a deflated data set, whose lengths
    /// cannot be checked before inflating it.
    pub fn of(transfer_syntax: &str) -> Option<Encoding> {
        match transfer_syntax {
            "1.2.840.10008.1.2" => Some(Encoding::ImplicitLittle),
            "1.2.840.10008.1.2.2" => Some(Encoding::ExplicitBig),
            "1.2.840.10008.1.2.1.99" => None,
            // Explicit VR little endian, and every encapsulated (compressed) syntax, which
            // encodes its data set that way (PS3.5 A.4).
            _ => Some(Encoding::ExplicitLittle),
        }
    }
}

struct Walk<'a> {
    bytes: &'a [u8],
    /// Offset of `bytes[0]` in the file, for messages.
    base: usize,
}

fn long_form(vr: &[u8]) -> bool {
    matches!(
        vr,
        b"OB"
            | b"OD"
            | b"OF"
            | b"OL"
            | b"OV"
            | b"OW"
            | b"SQ"
            | b"SV"
            | b"UC"
            | b"UN"
            | b"UR"
            | b"UT"
            | b"UV"
    )
}

impl Walk<'_> {
    fn u16_at(&self, pos: usize, big: bool) -> Result<u16, String> {
        let b = self
            .bytes
            .get(pos..pos + 2)
            .ok_or_else(|| self.truncated(pos))?;
        Ok(if big {
            u16::from_be_bytes([b[0], b[1]])
        } else {
            u16::from_le_bytes([b[0], b[1]])
        })
    }

    fn u32_at(&self, pos: usize, big: bool) -> Result<u32, String> {
        let b = self
            .bytes
            .get(pos..pos + 4)
            .ok_or_else(|| self.truncated(pos))?;
        Ok(if big {
            u32::from_be_bytes([b[0], b[1], b[2], b[3]])
        } else {
            u32::from_le_bytes([b[0], b[1], b[2], b[3]])
        })
    }

    fn truncated(&self, pos: usize) -> String {
        format!(
            "the file ends inside a data element header at byte {}",
            self.base + pos
        )
    }

    /// Walk the elements in `pos..end` until `end` or a delimiter; returns where it stopped
    /// (after the delimiter, when one ended it). `fragments`: the items here are fragments
    /// of encapsulated pixel data (bytes, not data sets).
    fn elements(
        &self,
        mut pos: usize,
        end: usize,
        data_set: Encoding,
        depth: usize,
        fragments: bool,
    ) -> Result<usize, String> {
        if depth > MAX_NESTING {
            return Err(format!(
                "sequences nest deeper than {MAX_NESTING} levels at byte {}",
                self.base + pos
            ));
        }
        while pos < end {
            // The meta group (group 0002) is explicit VR little endian whatever follows it.
            let group_le = self.u16_at(pos, false)?;
            let enc = if group_le == 0x0002 {
                Encoding::ExplicitLittle
            } else {
                data_set
            };
            let big = enc == Encoding::ExplicitBig;
            let tag = (self.u16_at(pos, big)?, self.u16_at(pos + 2, big)?);
            if tag == ITEM_END || tag == SEQUENCE_END {
                return Ok(pos + 8);
            }
            let (vr, len, header): (Option<&[u8]>, u32, usize) =
                if tag == ITEM || enc == Encoding::ImplicitLittle {
                    (None, self.u32_at(pos + 4, big)?, 8)
                } else {
                    let vr = self
                        .bytes
                        .get(pos + 4..pos + 6)
                        .ok_or_else(|| self.truncated(pos))?;
                    if long_form(vr) {
                        (Some(vr), self.u32_at(pos + 8, big)?, 12)
                    } else {
                        (Some(vr), u32::from(self.u16_at(pos + 6, big)?), 8)
                    }
                };
            let start = pos + header;
            if start > end {
                return Err(self.truncated(pos));
            }
            if len == UNDEFINED {
                // A sequence or encapsulated pixel data: items up to the sequence delimiter;
                // an item of undefined length itself ends with an item delimiter.
                let pixels = tag == (0x7FE0, 0x0010) || matches!(vr, Some(b"OB" | b"OW"));
                pos = self.elements(start, end, data_set, depth + 1, pixels)?;
                continue;
            }
            let len = len as usize;
            if len > end - start {
                return Err(format!(
                    "data element ({:04X},{:04X}) at byte {} declares {len} bytes, but only {} follow",
                    tag.0,
                    tag.1,
                    self.base + pos,
                    end - start
                ));
            }
            let nested = (tag == ITEM && !fragments)
                || vr == Some(b"SQ")
                || (vr.is_none()
                    && self.u16_at(start, big).ok() == Some(ITEM.0)
                    && self.u16_at(start + 2, big).ok() == Some(ITEM.1));
            if nested && len > 0 {
                self.elements(start, start + len, data_set, depth + 1, false)?;
            }
            pos = start + len;
        }
        Ok(pos)
    }
}

/// The transfer syntax UID of a Part 10 file, read from its file meta group (always explicit
/// VR little endian, PS3.10 7.1), whose lengths are checked on the way; `rest` starts after
/// `DICM`. `None` when the meta group names none.
pub fn meta_transfer_syntax(rest: &[u8]) -> Result<Option<String>, String> {
    let w = Walk {
        bytes: rest,
        base: 132,
    };
    let mut pos = 0;
    let mut ts = None;
    while pos + 8 <= rest.len() && w.u16_at(pos, false)? == 0x0002 {
        let elem = w.u16_at(pos + 2, false)?;
        let vr = &rest[pos + 4..pos + 6];
        let (len, header) = if long_form(vr) {
            (w.u32_at(pos + 8, false)? as usize, 12)
        } else {
            (usize::from(w.u16_at(pos + 6, false)?), 8)
        };
        let start = pos + header;
        if start > rest.len() || len > rest.len() - start {
            return Err(format!(
                "file meta element (0002,{elem:04X}) at byte {} declares {len} bytes, but only {} follow",
                132 + pos,
                rest.len().saturating_sub(start)
            ));
        }
        if elem == 0x0010 {
            let uid = String::from_utf8_lossy(&rest[start..start + len]);
            ts = Some(uid.trim_end_matches(['\0', ' ']).to_string());
        }
        pos = start + len;
    }
    Ok(ts)
}

/// Check every declared length of the Part 10 file whose bytes after the preamble and `DICM`
/// are `rest` (starting at file offset 132), with the data set in `encoding`.
pub fn check(rest: &[u8], encoding: Encoding) -> Result<(), String> {
    let w = Walk {
        bytes: rest,
        base: 132,
    };
    // A stray delimiter at the top level ends no sequence: the walk goes on after it, so
    // nothing behind it escapes the check.
    let mut pos = 0;
    while pos < rest.len() {
        let next = w.elements(pos, rest.len(), encoding, 0, false)?;
        if next <= pos {
            return Err(format!(
                "the data set stops making sense at byte {}",
                132 + pos
            ));
        }
        pos = next;
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    /// An explicit VR little endian element with a short (2-byte) length.
    fn short(group: u16, elem: u16, vr: &[u8; 2], value: &[u8]) -> Vec<u8> {
        let mut v = Vec::new();
        v.extend(group.to_le_bytes());
        v.extend(elem.to_le_bytes());
        v.extend(vr);
        v.extend((value.len() as u16).to_le_bytes());
        v.extend(value);
        v
    }

    /// An explicit VR little endian element with a 4-byte length (OB, OW, SQ, ...).
    fn long(group: u16, elem: u16, vr: &[u8; 2], len: u32, value: &[u8]) -> Vec<u8> {
        let mut v = Vec::new();
        v.extend(group.to_le_bytes());
        v.extend(elem.to_le_bytes());
        v.extend(vr);
        v.extend([0, 0]);
        v.extend(len.to_le_bytes());
        v.extend(value);
        v
    }

    fn item(len: u32, value: &[u8]) -> Vec<u8> {
        let mut v = vec![0xFE, 0xFF, 0x00, 0xE0];
        v.extend(len.to_le_bytes());
        v.extend(value);
        v
    }

    #[test]
    fn consistent_lengths_pass_and_a_length_past_the_end_is_named() {
        // Element layouts from DICOM PS3.5 section 7.1.2 (explicit VR little endian).
        let mut file = short(0x0002, 0x0010, b"UI", b"1.2.840.10008.1.2.1\0");
        file.extend(short(0x0028, 0x0010, b"US", &[4, 0]));
        file.extend(long(0x7FE0, 0x0010, b"OW", 8, &[0; 8]));
        assert_eq!(check(&file, Encoding::ExplicitLittle), Ok(()));
        // Pixel Data declaring 4 GB in a file of a few bytes.
        let mut hostile = short(0x0028, 0x0010, b"US", &[4, 0]);
        hostile.extend(long(0x7FE0, 0x0010, b"OW", 0xF000_0000, &[0; 8]));
        let e = check(&hostile, Encoding::ExplicitLittle).expect_err("refused");
        assert!(
            e.contains(
                "data element (7FE0,0010) at byte 142 declares 4026531840 bytes, but only 8 follow"
            ),
            "{e}"
        );
    }

    #[test]
    fn lengths_inside_sequences_and_items_are_checked_too() {
        // A sequence of undefined length holding one item of defined length whose element
        // declares more than the item holds (PS3.5 7.5.2, tables 7.5-1 and 7.5-3).
        let inner = long(0x300A, 0x00B6, b"OB", 1_000_000, &[0; 4]);
        let mut seq = long(0x300A, 0x00B0, b"SQ", UNDEFINED, &[]);
        seq.extend(item(inner.len() as u32, &inner));
        seq.extend([0xFE, 0xFF, 0xDD, 0xE0, 0, 0, 0, 0]);
        let e = check(&seq, Encoding::ExplicitLittle).expect_err("refused");
        assert!(
            e.contains("(300A,00B6)") && e.contains("declares 1000000 bytes"),
            "{e}"
        );
        // The same structure with a fitting length passes.
        let inner = long(0x300A, 0x00B6, b"OB", 4, &[0; 4]);
        let mut seq = long(0x300A, 0x00B0, b"SQ", UNDEFINED, &[]);
        seq.extend(item(inner.len() as u32, &inner));
        seq.extend([0xFE, 0xFF, 0xDD, 0xE0, 0, 0, 0, 0]);
        seq.extend(short(0x300A, 0x0002, b"SH", b"PLAN"));
        assert_eq!(check(&seq, Encoding::ExplicitLittle), Ok(()));
    }

    #[test]
    fn the_transfer_syntax_comes_from_the_meta_group() {
        let mut file = long(0x0002, 0x0001, b"OB", 2, &[0, 1]);
        file.extend(short(0x0002, 0x0010, b"UI", b"1.2.840.10008.1.2\0"));
        file.extend([0x28, 0, 0x10, 0, 2, 0, 0, 0, 4, 0]);
        assert_eq!(
            meta_transfer_syntax(&file),
            Ok(Some("1.2.840.10008.1.2".to_string()))
        );
        let hostile = long(0x0002, 0x0001, b"OB", 0xF000_0000, &[0, 1]);
        assert!(meta_transfer_syntax(&hostile).is_err());
    }

    #[test]
    fn encapsulated_fragments_are_bytes_not_elements() {
        // PS3.5 A.4: an offset table item and one fragment, ended by a sequence delimiter.
        let mut px = long(0x7FE0, 0x0010, b"OB", UNDEFINED, &[]);
        px.extend(item(0, &[]));
        px.extend(item(6, &[0xFF, 0xD8, 0x11, 0x22, 0xFF, 0xD9]));
        px.extend([0xFE, 0xFF, 0xDD, 0xE0, 0, 0, 0, 0]);
        assert_eq!(check(&px, Encoding::ExplicitLittle), Ok(()));
    }

    #[test]
    fn a_stray_delimiter_does_not_hide_what_follows() {
        // A sequence delimitation item (PS3.5 7.5) at the top level, then Pixel Data
        // declaring 4 GB: still refused.
        let mut v = vec![0xFE, 0xFF, 0xDD, 0xE0, 0, 0, 0, 0];
        v.extend(long(0x7FE0, 0x0010, b"OW", 0xF000_0000, &[0; 8]));
        assert!(check(&v, Encoding::ExplicitLittle).is_err());
    }

    #[test]
    fn implicit_vr_uses_four_byte_lengths() {
        // PS3.5 7.1.3: tag then a 4-byte length, no VR.
        let mut v = Vec::new();
        v.extend(0x0028u16.to_le_bytes());
        v.extend(0x0010u16.to_le_bytes());
        v.extend(2u32.to_le_bytes());
        v.extend([4, 0]);
        assert_eq!(check(&v, Encoding::ImplicitLittle), Ok(()));
        v.extend(0x7FE0u16.to_le_bytes());
        v.extend(0x0010u16.to_le_bytes());
        v.extend(0xF000_0000u32.to_le_bytes());
        assert!(check(&v, Encoding::ImplicitLittle).is_err());
    }
}

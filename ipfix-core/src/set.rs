//! Sets and Set Headers (RFC 7011 §3.3).

use crate::error::Malformed;

/// Octets in a Set Header (RFC 7011 §3.3.2).
pub const SET_HEADER_LEN: usize = 4;
/// Set ID of a Template Set (RFC 7011 §3.3.2).
pub const TEMPLATE_SET_ID: u16 = 2;
/// Set ID of an Options Template Set (RFC 7011 §3.3.2).
pub const OPTIONS_TEMPLATE_SET_ID: u16 = 3;
/// Lowest Set ID of a Data Set (RFC 7011 §3.3.2).
pub const MIN_DATA_SET_ID: u16 = 256;

/// A Set Header (RFC 7011 §3.3.2).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct SetHeader {
    /// 2 = Template Set, 3 = Options Template Set, ≥ 256 = Data Set.
    pub set_id: u16,
    /// Length of the Set in octets, header and padding included.
    pub length: u16,
}

/// What a Set holds, from its Set ID (RFC 7011 §3.3.2).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum SetKind {
    /// Set ID 2.
    Template,
    /// Set ID 3.
    OptionsTemplate,
    /// Set ID ≥ 256: records of the template with this ID.
    Data(u16),
    /// Set ID 0, 1 (historic) or 4..=255 (reserved): skipped by length.
    Reserved(u16),
}

impl SetHeader {
    /// The kind of Set this header introduces.
    pub const fn kind(&self) -> SetKind {
        match self.set_id {
            TEMPLATE_SET_ID => SetKind::Template,
            OPTIONS_TEMPLATE_SET_ID => SetKind::OptionsTemplate,
            id if id >= MIN_DATA_SET_ID => SetKind::Data(id),
            id => SetKind::Reserved(id),
        }
    }
}

/// One Set of a message: where it starts, its header, and its body (the
/// octets after the Set Header, padding included).
#[derive(Debug, Clone, Copy)]
pub struct RawSet<'a> {
    /// Offset of the Set Header from the start of the message.
    pub offset: usize,
    /// The Set Header.
    pub header: SetHeader,
    /// The octets after the header, up to the Set Length.
    pub body: &'a [u8],
}

/// Walks the Sets of a message body (RFC 7011 §3.3), using each Set Length to
/// find the next Set ("MUST be used", §3.3.2). Yields an error and stops
/// when a length is nonsensical.
pub struct Sets<'a> {
    rest: &'a [u8],
    offset: usize,
    failed: bool,
}

impl<'a> Sets<'a> {
    /// Iterates the Sets in `body`, which starts at `offset` in the message.
    pub const fn new(body: &'a [u8], offset: usize) -> Self {
        Self { rest: body, offset, failed: false }
    }
}

impl<'a> Iterator for Sets<'a> {
    type Item = Result<RawSet<'a>, Malformed>;

    fn next(&mut self) -> Option<Self::Item> {
        if self.failed || self.rest.is_empty() {
            return None;
        }
        let offset = self.offset;
        let Some((head, _)) = self.rest.split_first_chunk::<4>() else {
            self.failed = true;
            return Some(Err(Malformed::Truncated { offset, needed: SET_HEADER_LEN, available: self.rest.len() }));
        };
        let set_id = u16::from_be_bytes([head[0], head[1]]);
        let length = u16::from_be_bytes([head[2], head[3]]);
        let len = usize::from(length);
        // A Set shorter than its own header, or longer than what remains of
        // the message, is a nonsensical length (RFC 7011 §9.1).
        if len < SET_HEADER_LEN || len > self.rest.len() {
            self.failed = true;
            return Some(Err(Malformed::BadSetLength { offset, set_id, length: len, remaining: self.rest.len() }));
        }
        let (set, rest) = self.rest.split_at(len);
        let body = set.get(SET_HEADER_LEN..).unwrap_or_default();
        self.rest = rest;
        self.offset += len;
        Some(Ok(RawSet { offset, header: SetHeader { set_id, length }, body }))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn walks_sets_by_length() {
        // RFC 7011 §3.3.2: Length covers header + records + padding.
        let body = [0x00, 0x02, 0x00, 0x04, 0x01, 0x00, 0x00, 0x06, 0xaa, 0xbb];
        let sets: Vec<_> = Sets::new(&body, 16).collect::<Result<_, _>>().unwrap();
        assert_eq!(sets.len(), 2);
        assert_eq!(sets[0].header.kind(), SetKind::Template);
        assert_eq!(sets[1].offset, 20);
        assert_eq!(sets[1].header.kind(), SetKind::Data(256));
        assert_eq!(sets[1].body, &[0xaa, 0xbb]);
    }

    #[test]
    fn rejects_nonsensical_lengths() {
        // RFC 7011 §9.1: a Set longer than the message is malformed.
        let body = [0x01, 0x00, 0x00, 0x08, 0x00];
        assert!(matches!(Sets::new(&body, 16).next(), Some(Err(Malformed::BadSetLength { offset: 16, .. }))));
        let body = [0x01, 0x00, 0x00, 0x02];
        assert!(matches!(Sets::new(&body, 16).next(), Some(Err(Malformed::BadSetLength { .. }))));
        let body = [0x01, 0x00];
        assert!(matches!(Sets::new(&body, 16).next(), Some(Err(Malformed::Truncated { .. }))));
    }
}

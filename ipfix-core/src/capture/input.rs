//! A read-ahead buffer over `std::io::Read` that knows absolute offsets.

use std::io::{self, Read};

/// How much is asked of the underlying reader at a time.
const READ_CHUNK: usize = 64 * 1024;

/// Buffered input: `data()` is the unconsumed window, which starts at byte
/// `offset()` of the input.
#[derive(Debug)]
pub(crate) struct Input<R> {
    reader: R,
    buf: Vec<u8>,
    /// Start of the unconsumed data in `buf`.
    start: usize,
    /// Absolute offset of `buf[start]`.
    offset: u64,
    /// Octets taken from the reader so far.
    bytes_read: u64,
    eof: bool,
}

impl<R: Read> Input<R> {
    pub(crate) fn new(reader: R) -> Self {
        Self { reader, buf: Vec::new(), start: 0, offset: 0, bytes_read: 0, eof: false }
    }

    /// The unconsumed octets read so far.
    pub(crate) fn data(&self) -> &[u8] {
        self.buf.get(self.start..).unwrap_or(&[])
    }

    /// Absolute offset of `data()[0]`.
    pub(crate) fn offset(&self) -> u64 {
        self.offset
    }

    /// Octets taken from the underlying reader.
    pub(crate) fn bytes_read(&self) -> u64 {
        self.bytes_read
    }

    /// True once the reader reported end of input.
    pub(crate) fn at_eof(&self) -> bool {
        self.eof
    }

    /// Marks `n` octets (at most `data().len()`) as used.
    pub(crate) fn consume(&mut self, n: usize) {
        let n = n.min(self.buf.len().saturating_sub(self.start));
        self.start += n;
        self.offset += n as u64;
    }

    /// Reads until `data()` holds at least `want` octets or the input ends.
    /// Returns whether `want` octets are available.
    pub(crate) fn fill(&mut self, want: usize) -> io::Result<bool> {
        while self.data().len() < want && !self.eof {
            if self.start > 0 && (self.start >= self.buf.len() / 2 || self.buf.len() + READ_CHUNK > self.buf.capacity()) {
                self.buf.drain(..self.start);
                self.start = 0;
            }
            let old = self.buf.len();
            let ask = READ_CHUNK.max(want.saturating_sub(self.data().len()));
            self.buf.resize(old + ask, 0);
            let got = loop {
                match self.reader.read(self.buf.get_mut(old..).unwrap_or(&mut [])) {
                    Ok(n) => break n,
                    Err(e) if e.kind() == io::ErrorKind::Interrupted => continue,
                    Err(e) => {
                        self.buf.truncate(old);
                        return Err(e);
                    }
                }
            };
            self.buf.truncate(old + got);
            self.bytes_read += got as u64;
            if got == 0 {
                self.eof = true;
            }
        }
        Ok(self.data().len() >= want)
    }
}

#[cfg(test)]
#[allow(clippy::indexing_slicing, clippy::unwrap_used)]
mod tests {
    use super::*;

    /// A reader that hands out one octet per call, to exercise refills.
    struct Trickle<'a>(&'a [u8]);
    impl Read for Trickle<'_> {
        fn read(&mut self, out: &mut [u8]) -> io::Result<usize> {
            match (self.0.split_first(), out.first_mut()) {
                (Some((b, rest)), Some(o)) => {
                    *o = *b;
                    self.0 = rest;
                    Ok(1)
                }
                _ => Ok(0),
            }
        }
    }

    #[test]
    fn fill_consume_and_offsets() {
        let data: Vec<u8> = (0..=255).collect();
        let mut input = Input::new(Trickle(&data));
        assert!(input.fill(10).expect("fill"));
        assert_eq!(input.data().get(..3), Some(&[0u8, 1, 2][..]));
        input.consume(7);
        assert_eq!(input.offset(), 7);
        assert!(input.fill(200).expect("fill"));
        assert_eq!(input.data().first(), Some(&7));
        assert!(!input.fill(300).expect("fill"));
        assert!(input.at_eof());
        assert_eq!(input.data().len(), 249);
        assert_eq!(input.bytes_read(), 256);
        input.consume(1000);
        assert_eq!(input.offset(), 256);
        assert!(input.data().is_empty());
    }
}

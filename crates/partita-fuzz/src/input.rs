//! Reading a fuzz input as a sequence of small decisions: bytes, integers, a choice from a list. An input
//! that runs out reads as zeros, so every input, however short, is a complete run.

/// A cursor over the fuzz input.
#[derive(Debug)]
pub struct Input<'a> {
    data: &'a [u8],
}

impl<'a> Input<'a> {
    /// A cursor at the start of `data`.
    pub fn new(data: &'a [u8]) -> Self {
        Self { data }
    }

    /// Whether nothing is left.
    pub fn is_empty(&self) -> bool {
        self.data.is_empty()
    }

    /// The next byte (0 once the input is used up).
    pub fn u8(&mut self) -> u8 {
        match self.data.split_first() {
            Some((&b, rest)) => {
                self.data = rest;
                b
            }
            None => 0,
        }
    }

    /// A yes or no: the lowest bit of the next byte is 0.
    pub fn flag(&mut self) -> bool {
        self.u8() & 1 == 0
    }

    /// The next 4 bytes, little-endian.
    pub fn u32(&mut self) -> u32 {
        u32::from_le_bytes([self.u8(), self.u8(), self.u8(), self.u8()])
    }

    /// The next 8 bytes, little-endian.
    pub fn u64(&mut self) -> u64 {
        u64::from(self.u32()) | (u64::from(self.u32()) << 32)
    }

    /// The next 8 bytes as an f64 (any bit pattern: NaN, infinities, subnormals).
    pub fn f64(&mut self) -> f64 {
        f64::from_bits(self.u64())
    }

    /// One of `values`, chosen by the next byte.
    pub fn pick<T: Copy>(&mut self, values: &[T]) -> T {
        values[usize::from(self.u8()) % values.len()]
    }

    /// A u32 that is usually small: the next byte picks 0..=200 directly, or (above 200) a raw u32, so both
    /// plausible sizes and extremes are reached.
    pub fn size_u32(&mut self) -> u32 {
        match self.u8() {
            b @ 0..=200 => u32::from(b),
            201..=230 => u32::from(self.u8()) << (self.u8() % 24),
            _ => self.u32(),
        }
    }

    /// Everything left.
    pub fn rest(&mut self) -> &'a [u8] {
        std::mem::take(&mut self.data)
    }
}

//! Register words → typed values → engineering units, described by a map a config file can hold.
//!
//! Modbus registers are 16-bit words sent high byte first (V1.1b3 §4.2); how two words make a 32-bit
//! value is the device's choice, so the word order is part of the map. Decoding refuses a wrong word
//! count and non-finite floats with a typed error; it never panics and never invents a value.

use serde::Deserialize;

use crate::pdu::Request;

/// Which register table a value lives in.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum RegisterTable {
    /// Holding registers, read with FC 03.
    Holding,
    /// Input registers, read with FC 04.
    Input,
}

/// The type a value is stored as in the device.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum ValueType {
    /// One word, unsigned.
    U16,
    /// One word, two's complement.
    I16,
    /// Two words, unsigned.
    U32,
    /// Two words, two's complement.
    I32,
    /// Two words, IEEE 754 single precision.
    F32,
}

impl ValueType {
    /// Registers the type occupies.
    pub fn words(self) -> u16 {
        match self {
            ValueType::U16 | ValueType::I16 => 1,
            ValueType::U32 | ValueType::I32 | ValueType::F32 => 2,
        }
    }
}

/// The order of the two words of a 32-bit value.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum WordOrder {
    /// The word at the lower address holds the high half (big-endian words; the common default).
    #[default]
    HighFirst,
    /// The word at the lower address holds the low half ("word-swapped").
    LowFirst,
}

/// Where a value lives in a device and how its raw number becomes an engineering value:
/// `value = raw × scale + offset`.
#[derive(Clone, Debug, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RegisterMap {
    /// Register table: `holding` or `input`.
    pub table: RegisterTable,
    /// Address of the first word (0-based, as on the wire).
    pub address: u16,
    /// Stored type: `u16`, `i16`, `u32`, `i32` or `f32`.
    #[serde(rename = "type")]
    pub value_type: ValueType,
    /// Word order of 32-bit types: `high-first` (default) or `low-first`.
    #[serde(default)]
    pub word_order: WordOrder,
    /// Multiplier from the raw number to the engineering unit (default 1).
    #[serde(default = "one")]
    pub scale: f64,
    /// Added after scaling (default 0).
    #[serde(default)]
    pub offset: f64,
}

fn one() -> f64 {
    1.0
}

/// A decoded register value.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Decoded {
    /// The number the device stored.
    pub raw: f64,
    /// `raw × scale + offset`.
    pub value: f64,
}

/// Why words could not be decoded, or a map is unusable.
#[derive(Clone, Debug, PartialEq, thiserror::Error)]
pub enum RegisterError {
    /// Not as many words as the type needs.
    #[error("{actual} register word(s) given, the type needs {expected}")]
    WordCount {
        /// Words the type needs.
        expected: usize,
        /// Words given.
        actual: usize,
    },
    /// A float that is NaN or infinite (a device's "no value" marker, or garbage).
    #[error("the register holds a non-finite float ({0})")]
    NotFinite(f32),
    /// The map's scale is zero or not finite, or its offset not finite.
    #[error("scale must be finite and non-zero and offset finite (scale {scale}, offset {offset})")]
    BadScale {
        /// The map's scale.
        scale: f64,
        /// The map's offset.
        offset: f64,
    },
    /// The value's words run past register 65535.
    #[error("address {address} with {words} word(s) runs past register 65535")]
    AddressOverflow {
        /// First address.
        address: u16,
        /// Words of the type.
        words: u16,
    },
}

impl RegisterMap {
    /// Checks what deserialisation cannot: scale and offset usable, the words inside the address space.
    pub fn validate(&self) -> Result<(), RegisterError> {
        if !self.scale.is_finite() || self.scale == 0.0 || !self.offset.is_finite() {
            return Err(RegisterError::BadScale { scale: self.scale, offset: self.offset });
        }
        let words = self.value_type.words();
        if u32::from(self.address) + u32::from(words) > 0x1_0000 {
            return Err(RegisterError::AddressOverflow { address: self.address, words });
        }
        Ok(())
    }

    /// Registers to read.
    pub fn quantity(&self) -> u16 {
        self.value_type.words()
    }

    /// The read request that fetches this value.
    pub fn request(&self) -> Request {
        let (address, quantity) = (self.address, self.quantity());
        match self.table {
            RegisterTable::Holding => Request::ReadHoldingRegisters { address, quantity },
            RegisterTable::Input => Request::ReadInputRegisters { address, quantity },
        }
    }

    /// Decodes the value from exactly its words.
    pub fn decode(&self, words: &[u16]) -> Result<Decoded, RegisterError> {
        let raw = decode_raw(self.value_type, self.word_order, words)?;
        Ok(Decoded { raw, value: raw * self.scale + self.offset })
    }
}

/// Decodes a raw number from exactly the words of `value_type`.
pub fn decode_raw(value_type: ValueType, order: WordOrder, words: &[u16]) -> Result<f64, RegisterError> {
    let expected = usize::from(value_type.words());
    if words.len() != expected {
        return Err(RegisterError::WordCount { expected, actual: words.len() });
    }
    let joined = || match order {
        WordOrder::HighFirst => (u32::from(words[0]) << 16) | u32::from(words[1]),
        WordOrder::LowFirst => (u32::from(words[1]) << 16) | u32::from(words[0]),
    };
    Ok(match value_type {
        ValueType::U16 => f64::from(words[0]),
        ValueType::I16 => f64::from(words[0] as i16),
        ValueType::U32 => f64::from(joined()),
        ValueType::I32 => f64::from(joined() as i32),
        ValueType::F32 => {
            let float = f32::from_bits(joined());
            if !float.is_finite() {
                return Err(RegisterError::NotFinite(float));
            }
            f64::from(float)
        }
    })
}

/// Encodes a 32-bit pattern as two words in `order` (the device's side, e.g. the simulator).
pub fn encode_u32(bits: u32, order: WordOrder) -> [u16; 2] {
    let (high, low) = ((bits >> 16) as u16, bits as u16);
    match order {
        WordOrder::HighFirst => [high, low],
        WordOrder::LowFirst => [low, high],
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn map(value_type: ValueType, word_order: WordOrder, scale: f64, offset: f64) -> RegisterMap {
        RegisterMap { table: RegisterTable::Input, address: 0, value_type, word_order, scale, offset }
    }

    #[test]
    fn signed_and_unsigned_words_decode() {
        assert_eq!(decode_raw(ValueType::U16, WordOrder::HighFirst, &[0xFFFF]), Ok(65535.0));
        assert_eq!(decode_raw(ValueType::I16, WordOrder::HighFirst, &[0xFFFF]), Ok(-1.0));
        assert_eq!(decode_raw(ValueType::U32, WordOrder::HighFirst, &[0x0001, 0x0000]), Ok(65536.0));
        assert_eq!(decode_raw(ValueType::U32, WordOrder::LowFirst, &[0x0000, 0x0001]), Ok(65536.0));
        assert_eq!(decode_raw(ValueType::I32, WordOrder::HighFirst, &[0xFFFF, 0xFFFE]), Ok(-2.0));
        assert_eq!(decode_raw(ValueType::I32, WordOrder::LowFirst, &[0xFFFE, 0xFFFF]), Ok(-2.0));
    }

    /// IEEE 754: 0x4049_0FDB is π in single precision, 0x3F80_0000 is 1.0 (IEEE 754-2008 binary32).
    #[test]
    fn floats_decode_in_both_word_orders() {
        let pi = decode_raw(ValueType::F32, WordOrder::HighFirst, &[0x4049, 0x0FDB]).unwrap();
        assert!((pi - std::f64::consts::PI).abs() < 1e-6);
        assert_eq!(decode_raw(ValueType::F32, WordOrder::LowFirst, &[0x0000, 0x3F80]), Ok(1.0));
        assert!(matches!(
            decode_raw(ValueType::F32, WordOrder::HighFirst, &[0x7FC0, 0x0000]),
            Err(RegisterError::NotFinite(_))
        ));
        assert!(matches!(
            decode_raw(ValueType::F32, WordOrder::HighFirst, &[0x7F80, 0x0000]),
            Err(RegisterError::NotFinite(_))
        ));
    }

    #[test]
    fn scale_and_offset_give_engineering_value() {
        // The simulator's displacement: i32 in 0.1 µm → mm (scale 1e-4).
        let displacement = map(ValueType::I32, WordOrder::HighFirst, 1e-4, 0.0);
        let decoded = displacement.decode(&encode_u32(123_456u32, WordOrder::HighFirst)).unwrap();
        assert_eq!(decoded.raw, 123_456.0);
        assert!((decoded.value - 12.3456).abs() < 1e-12);
        let temperature = map(ValueType::I16, WordOrder::HighFirst, 0.01, -0.5);
        assert!((temperature.decode(&[2050]).unwrap().value - 20.0).abs() < 1e-12);
    }

    #[test]
    fn wrong_word_count_is_refused() {
        let m = map(ValueType::I32, WordOrder::HighFirst, 1.0, 0.0);
        assert_eq!(m.decode(&[1]), Err(RegisterError::WordCount { expected: 2, actual: 1 }));
        assert_eq!(m.decode(&[1, 2, 3]), Err(RegisterError::WordCount { expected: 2, actual: 3 }));
    }

    #[test]
    fn validate_refuses_zero_scale_and_overflow() {
        assert!(map(ValueType::U16, WordOrder::HighFirst, 0.0, 0.0).validate().is_err());
        assert!(map(ValueType::U16, WordOrder::HighFirst, f64::NAN, 0.0).validate().is_err());
        let mut m = map(ValueType::U32, WordOrder::HighFirst, 1.0, 0.0);
        m.address = 65535;
        assert_eq!(m.validate(), Err(RegisterError::AddressOverflow { address: 65535, words: 2 }));
        m.address = 65534;
        assert!(m.validate().is_ok());
    }

    #[test]
    fn map_deserialises_from_config_and_refuses_unknown_fields() {
        let m: RegisterMap = toml::from_str(
            "table = \"input\"\naddress = 2\ntype = \"i32\"\nword_order = \"low-first\"\nscale = 0.0001\n",
        )
        .unwrap();
        assert_eq!(m.value_type, ValueType::I32);
        assert_eq!(m.word_order, WordOrder::LowFirst);
        assert_eq!(m.offset, 0.0);
        assert_eq!(m.request(), Request::ReadInputRegisters { address: 2, quantity: 2 });
        let bad = toml::from_str::<RegisterMap>("table = \"input\"\naddress = 2\ntype = \"i32\"\nscael = 2.0\n");
        assert!(bad.unwrap_err().to_string().contains("unknown field `scael`"));
        let bad = toml::from_str::<RegisterMap>("table = \"coil\"\naddress = 2\ntype = \"i32\"\n");
        assert!(bad.unwrap_err().to_string().contains("unknown variant `coil`"));
    }

    proptest::proptest! {
        #![proptest_config(proptest::prelude::ProptestConfig::with_cases(5000))]
        /// encode ∘ decode is the identity for every 32-bit integer in both word orders.
        #[test]
        fn i32_round_trips(value: i32, low_first: bool) {
            let order = if low_first { WordOrder::LowFirst } else { WordOrder::HighFirst };
            let words = encode_u32(value as u32, order);
            proptest::prop_assert_eq!(decode_raw(ValueType::I32, order, &words), Ok(f64::from(value)));
        }
    }
}

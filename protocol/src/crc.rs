//! CRC-16/MODBUS, the check field of every RTU frame.
//!
//! Reflected polynomial 0xA001 (0x8005), initial value 0xFFFF, no final XOR; sent low byte first
//! (Modbus over Serial Line V1.02, §2.5.1.2 and Appendix B).

/// Lookup table for the reflected polynomial, built at compile time.
const TABLE: [u16; 256] = {
    let mut table = [0u16; 256];
    let mut i = 0;
    while i < 256 {
        let mut crc = i as u16;
        let mut bit = 0;
        while bit < 8 {
            crc = if crc & 1 != 0 { (crc >> 1) ^ 0xA001 } else { crc >> 1 };
            bit += 1;
        }
        table[i] = crc;
        i += 1;
    }
    table
};

/// The CRC-16/MODBUS of `data`. On the wire it follows the frame low byte first.
pub fn crc16(data: &[u8]) -> u16 {
    data.iter().fold(0xFFFF, |crc, &byte| (crc >> 8) ^ TABLE[usize::from((crc ^ u16::from(byte)) as u8)])
}

/// Appends the CRC of `frame` to it, low byte first.
pub fn append_crc(frame: &mut Vec<u8>) {
    let crc = crc16(frame);
    frame.extend_from_slice(&crc.to_le_bytes());
}

/// Whether `adu` (frame followed by its two CRC bytes) carries a correct CRC.
pub fn check_crc(adu: &[u8]) -> bool {
    adu.len() >= 2 && {
        let (body, tail) = adu.split_at(adu.len() - 2);
        crc16(body).to_le_bytes() == [tail[0], tail[1]]
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Check value of CRC-16/MODBUS over ASCII "123456789": 0x4B37
    /// (Greg Cook's "Catalogue of parametrised CRC algorithms", CRC-16/MODBUS entry).
    #[test]
    fn check_value_matches_crc_catalogue() {
        assert_eq!(crc16(b"123456789"), 0x4B37);
    }

    /// Modbus over Serial Line V1.02 §2.5.1.2: the CRC of `01 03 00 00 00 02` is sent as `C4 0B`
    /// (the `crc` crate's CRC_16_MODBUS, a reference library, gives the same).
    #[test]
    fn read_request_crc_goes_low_byte_first() {
        let mut frame = vec![0x01, 0x03, 0x00, 0x00, 0x00, 0x02];
        append_crc(&mut frame);
        assert_eq!(&frame[6..], &[0xC4, 0x0B]);
        assert!(check_crc(&frame));
    }

    #[test]
    fn empty_input_gives_initial_value_and_short_adu_fails_check() {
        assert_eq!(crc16(&[]), 0xFFFF);
        assert!(!check_crc(&[0x01]));
    }

    proptest::proptest! {
        #![proptest_config(proptest::prelude::ProptestConfig::with_cases(4000))]
        /// Agreement with an independent implementation: the `crc` crate's `CRC_16_MODBUS` (crates.io, v3).
        #[test]
        fn agrees_with_crc_crate_on_random_buffers(data in proptest::collection::vec(proptest::num::u8::ANY, 0..300)) {
            let oracle = ::crc::Crc::<u16>::new(&::crc::CRC_16_MODBUS);
            proptest::prop_assert_eq!(crc16(&data), oracle.checksum(&data));
        }

        /// Residue property: any frame followed by its CRC checks, and any single flipped bit is caught.
        #[test]
        fn single_bit_flips_are_detected(data in proptest::collection::vec(proptest::num::u8::ANY, 1..256), bit in 0usize..2048) {
            let mut adu = data.clone();
            append_crc(&mut adu);
            proptest::prop_assert!(check_crc(&adu));
            let bit = bit % (adu.len() * 8);
            adu[bit / 8] ^= 1 << (bit % 8);
            proptest::prop_assert!(!check_crc(&adu));
        }
    }
}

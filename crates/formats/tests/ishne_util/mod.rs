//! Builds ISHNE Holter bytes field by field at the offsets of the ISHNE
//! publication (Badilini 1998, layout from memory), independently of the
//! crate's reader, so tests can craft valid and broken files.
#![allow(dead_code)]

pub struct Ishne {
    pub fs: i16,
    /// Lead specification codes (ISHNE table: 5 = I, 6 = II, 11 = V1, ...).
    pub codes: Vec<i16>,
    /// Amplitude resolution per lead, nV per digital unit.
    pub res_nv: Vec<i16>,
    /// Digital samples per lead.
    pub data: Vec<Vec<i16>>,
    pub sex: i16,
    /// (day, month, year)
    pub birth: (i16, i16, i16),
    pub recorded: (i16, i16, i16),
    pub id: String,
    pub var_block: Vec<u8>,
}

fn put(out: &mut [u8], at: usize, bytes: &[u8]) {
    out[at..at + bytes.len()].copy_from_slice(bytes);
}

/// CRC-16/CCITT-FALSE computed byte by byte from a 256-entry table, a second
/// implementation beside the crate's bitwise one.
pub fn crc_table(bytes: &[u8]) -> u16 {
    let mut table = [0u16; 256];
    for (i, t) in table.iter_mut().enumerate() {
        let mut c = (i as u16) << 8;
        for _ in 0..8 {
            c = if c & 0x8000 != 0 {
                (c << 1) ^ 0x1021
            } else {
                c << 1
            };
        }
        *t = c;
    }
    bytes.iter().fold(0xffff, |crc: u16, &b| {
        (crc << 8) ^ table[((crc >> 8) as u8 ^ b) as usize]
    })
}

impl Ishne {
    pub fn bytes(&self) -> Vec<u8> {
        let nl = self.codes.len();
        let n = self.data.first().map_or(0, Vec::len);
        let ecg_offset = 522 + self.var_block.len();
        let mut h = vec![0u8; 522];
        put(&mut h, 0, b"ISHNE1.0");
        put(&mut h, 10, &(self.var_block.len() as i32).to_le_bytes());
        put(&mut h, 14, &(n as i32).to_le_bytes());
        put(&mut h, 18, &522i32.to_le_bytes());
        put(&mut h, 22, &(ecg_offset as i32).to_le_bytes());
        put(&mut h, 26, &1i16.to_le_bytes());
        put(&mut h, 28, b"Test");
        put(&mut h, 68, b"Subject");
        put(&mut h, 108, self.id.as_bytes());
        put(&mut h, 128, &self.sex.to_le_bytes());
        for (k, v) in [self.birth.0, self.birth.1, self.birth.2]
            .iter()
            .enumerate()
        {
            put(&mut h, 132 + 2 * k, &v.to_le_bytes());
        }
        for (k, v) in [self.recorded.0, self.recorded.1, self.recorded.2]
            .iter()
            .enumerate()
        {
            put(&mut h, 138 + 2 * k, &v.to_le_bytes());
        }
        put(&mut h, 156, &(nl as i16).to_le_bytes());
        for k in 0..12 {
            let (code, res) = if k < nl {
                (self.codes[k], self.res_nv[k])
            } else {
                (-9, -9)
            };
            put(&mut h, 158 + 2 * k, &code.to_le_bytes());
            put(&mut h, 182 + 2 * k, &(-9i16).to_le_bytes());
            put(&mut h, 206 + 2 * k, &res.to_le_bytes());
        }
        put(&mut h, 230, &(-9i16).to_le_bytes());
        put(&mut h, 232, b"test recorder");
        put(&mut h, 272, &self.fs.to_le_bytes());
        h.extend_from_slice(&self.var_block);
        let crc = crc_table(&h[10..]);
        put(&mut h, 8, &crc.to_le_bytes());
        for i in 0..n {
            for lead in &self.data {
                h.extend_from_slice(&lead[i].to_le_bytes());
            }
        }
        h
    }
}

//! Checksummed lines: the framing of the journal.
//!
//! Every record is one line, `<checksum> <json>\n`, where the checksum is the first
//! [`CHECKSUM_HEX`] hex digits of the SHA-256 of the JSON text. A record counts only when its
//! line is complete (ends in a newline) and its checksum matches, so a record torn by a crash
//! (cut short, or with garbage where the file system had not yet written the data) is detected.
//! Records are appended one at a time and made durable before the next, so only the last line
//! can be torn; a bad line before the last means the file was damaged otherwise.

use sha2::{Digest, Sha256};

/// Hex digits of SHA-256 kept as a line's checksum (64 bits: a torn line passes by chance with
/// probability 2⁻⁶⁴).
const CHECKSUM_HEX: usize = 16;

/// The line of `record`, newline included.
pub fn line(record: &serde_json::Value) -> Vec<u8> {
    let json = record.to_string();
    format!("{} {json}\n", checksum(json.as_bytes())).into_bytes()
}

fn checksum(json: &[u8]) -> String {
    let digest = Sha256::digest(json);
    let hex: String = digest.iter().map(|b| format!("{b:02x}")).collect();
    hex[..CHECKSUM_HEX].to_string()
}

/// The intact records of a journal's bytes.
#[derive(Debug)]
pub struct Frames {
    /// Each intact record with its line number (from 1).
    pub records: Vec<(usize, serde_json::Value)>,
    /// Bytes up to the end of the last intact record.
    pub intact_len: u64,
    /// The last line was torn (incomplete, or its checksum or JSON did not match) and is ignored.
    pub torn: bool,
}

/// A line before the last that is not an intact record.
#[derive(Debug, PartialEq, Eq)]
pub struct Damaged {
    /// Line number, from 1.
    pub line: usize,
    /// What is wrong with it.
    pub reason: String,
}

/// Reads the records of `bytes`; the last line may be torn (see the module docs).
pub fn read(bytes: &[u8]) -> Result<Frames, Damaged> {
    let mut frames = Frames {
        records: Vec::new(),
        intact_len: 0,
        torn: false,
    };
    let mut rest = bytes;
    let mut number = 0;
    while !rest.is_empty() {
        number += 1;
        let (text, complete) = match rest.iter().position(|&b| b == b'\n') {
            Some(end) => (&rest[..end], true),
            None => (rest, false),
        };
        let consumed = text.len() + usize::from(complete);
        let last = consumed == rest.len();
        match record(text, complete) {
            Ok(value) => {
                frames.records.push((number, value));
                frames.intact_len += consumed as u64;
            }
            Err(_) if last => frames.torn = true,
            Err(reason) => {
                return Err(Damaged {
                    line: number,
                    reason,
                });
            }
        }
        rest = &rest[consumed..];
    }
    Ok(frames)
}

/// The record of one line (without its newline).
fn record(text: &[u8], complete: bool) -> Result<serde_json::Value, String> {
    if !complete {
        return Err("the line has no end".to_string());
    }
    let text = std::str::from_utf8(text).map_err(|_| "the line is not UTF-8 text".to_string())?;
    let (sum, json) = text
        .split_once(' ')
        .ok_or_else(|| "expected a checksum, a space and a record".to_string())?;
    if sum != checksum(json.as_bytes()) {
        return Err("the checksum does not match the record".to_string());
    }
    serde_json::from_str(json).map_err(|e| format!("the record is not JSON: {e}"))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Common practice for append-only logs: a torn tail is dropped, damage before it is not.
    #[test]
    fn torn_tail_is_dropped_and_earlier_damage_refused() {
        let a = line(&serde_json::json!({"a": 1}));
        let b = line(&serde_json::json!({"b": [2, 3]}));
        let whole = [a.clone(), b.clone()].concat();
        let frames = read(&whole).unwrap();
        assert_eq!(frames.records.len(), 2);
        assert!(!frames.torn);
        assert_eq!(frames.intact_len, whole.len() as u64);
        for cut in 1..b.len() {
            let frames = read(&whole[..a.len() + cut]).unwrap();
            assert_eq!(frames.records.len(), 1, "cut after {cut} bytes");
            assert!(frames.torn);
            assert_eq!(frames.intact_len, a.len() as u64);
        }
        let mut flipped = whole.clone();
        flipped[a.len() + 20] ^= 1;
        assert!(read(&flipped).unwrap().torn);
        let mut damaged = whole.clone();
        damaged[20] ^= 1;
        assert_eq!(read(&damaged).unwrap_err().line, 1);
    }
}

//! The one place that turns typed bodies into CBOR bytes and back.
//!
//! Bodies are plain structs (no `HashMap`, no `serde(flatten)`), so each value has exactly one
//! encoding. [`decode_exact`] decodes, re-encodes and rejects input whose bytes differ, so a
//! non-canonical or padded body can never pass as a valid record. The CBOR library (serde_cbor,
//! archived upstream) is used nowhere else, so it can be replaced without touching stored bytes.

use serde::de::DeserializeOwned;
use serde::Serialize;

/// Why a value could not be encoded or decoded.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct CodecError(pub String);

impl std::fmt::Display for CodecError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(&self.0)
    }
}

impl std::error::Error for CodecError {}

/// Encodes a value as CBOR (definite lengths, struct fields in declaration order).
pub fn encode<T: Serialize>(value: &T) -> Result<Vec<u8>, CodecError> {
    serde_cbor::to_vec(value).map_err(|e| CodecError(e.to_string()))
}

/// Decodes CBOR and insists that re-encoding the value yields the very same bytes.
pub fn decode_exact<T: Serialize + DeserializeOwned>(bytes: &[u8]) -> Result<T, CodecError> {
    let value: T = serde_cbor::from_slice(bytes).map_err(|e| CodecError(e.to_string()))?;
    // Re-encode straight into a comparison with the stored bytes: nothing is allocated, and
    // the first differing byte ends the encoding.
    let mut compare = SameAs {
        expected: bytes,
        matched: 0,
    };
    let same = value
        .serialize(&mut serde_cbor::Serializer::new(
            serde_cbor::ser::IoWrite::new(&mut compare),
        ))
        .is_ok();
    if !same || compare.matched != bytes.len() {
        let again = encode(&value)?;
        return Err(CodecError(format!(
            "bytes are not in the one encoding of this record ({} bytes stored, {} when re-encoded)",
            bytes.len(),
            again.len()
        )));
    }
    Ok(value)
}

/// A writer that accepts only a prefix of `expected`, and counts how much of it has been written.
struct SameAs<'a> {
    expected: &'a [u8],
    matched: usize,
}

impl std::io::Write for SameAs<'_> {
    fn write(&mut self, buf: &[u8]) -> std::io::Result<usize> {
        let rest = &self.expected[self.matched..];
        if rest.len() < buf.len() || &rest[..buf.len()] != buf {
            return Err(std::io::Error::other("differs from the stored bytes"));
        }
        self.matched += buf.len();
        Ok(buf.len())
    }

    fn flush(&mut self) -> std::io::Result<()> {
        Ok(())
    }
}

/// Renders CBOR bytes in the diagnostic notation of RFC 8949 section 8, for people reading an
/// entry whose kind this build may not know.
pub fn diagnostic(bytes: &[u8]) -> Result<String, CodecError> {
    let value: serde_cbor::Value =
        serde_cbor::from_slice(bytes).map_err(|e| CodecError(e.to_string()))?;
    let mut text = String::new();
    write_diagnostic(&value, &mut text);
    Ok(text)
}

fn write_diagnostic(value: &serde_cbor::Value, out: &mut String) {
    use serde_cbor::Value;
    match value {
        Value::Null => out.push_str("null"),
        Value::Bool(b) => out.push_str(if *b { "true" } else { "false" }),
        Value::Integer(i) => out.push_str(&i.to_string()),
        Value::Float(f) => out.push_str(&format!("{f:?}")),
        Value::Bytes(b) => out.push_str(&format!("h'{}'", hex::encode(b))),
        Value::Text(t) => out.push_str(&format!("{t:?}")),
        Value::Array(items) => {
            out.push('[');
            for (i, item) in items.iter().enumerate() {
                if i > 0 {
                    out.push_str(", ");
                }
                write_diagnostic(item, out);
            }
            out.push(']');
        }
        Value::Map(map) => {
            out.push('{');
            for (i, (k, v)) in map.iter().enumerate() {
                if i > 0 {
                    out.push_str(", ");
                }
                write_diagnostic(k, out);
                out.push_str(": ");
                write_diagnostic(v, out);
            }
            out.push('}');
        }
        Value::Tag(tag, inner) => {
            out.push_str(&format!("{tag}("));
            write_diagnostic(inner, out);
            out.push(')');
        }
        _ => out.push_str("undefined"),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use serde::Deserialize;

    // RFC 8949 Appendix A, examples of encoded data items.
    #[test]
    fn encodes_rfc_8949_appendix_a_examples() {
        assert_eq!(encode(&0u32).unwrap(), [0x00]);
        assert_eq!(encode(&24u32).unwrap(), [0x18, 0x18]);
        assert_eq!(encode(&-1i32).unwrap(), [0x20]);
        assert_eq!(encode(&"a").unwrap(), [0x61, 0x61]);
        assert_eq!(encode(&vec![1u8, 2, 3]).unwrap(), [0x83, 0x01, 0x02, 0x03]);
    }

    #[derive(Serialize, Deserialize, Debug, PartialEq)]
    struct Sample {
        name: String,
        count: u32,
    }

    #[test]
    fn decode_of_encode_is_identity() {
        let s = Sample {
            name: "tare".into(),
            count: 3,
        };
        let bytes = encode(&s).unwrap();
        assert_eq!(decode_exact::<Sample>(&bytes).unwrap(), s);
    }

    #[test]
    fn rejects_non_canonical_integer_encoding() {
        let mut bytes = encode(&Sample {
            name: "x".into(),
            count: 3,
        })
        .unwrap();
        // Replace the final one-byte integer 3 (0x03) by the two-byte form 0x18 0x03,
        // which decodes to the same value (RFC 8949 3.1) but is not the preferred encoding.
        assert_eq!(bytes.pop(), Some(0x03));
        bytes.extend([0x18, 0x03]);
        let err = decode_exact::<Sample>(&bytes).unwrap_err();
        assert!(err.0.contains("not in the one encoding"), "{err}");
    }

    // RFC 8949 section 8 diagnostic notation, examples from Appendix A.
    #[test]
    fn renders_diagnostic_notation() {
        assert_eq!(diagnostic(&[0x83, 0x01, 0x02, 0x03]).unwrap(), "[1, 2, 3]");
        assert_eq!(diagnostic(&[0x43, 0x01, 0x02, 0x03]).unwrap(), "h'010203'");
        assert_eq!(diagnostic(&[0xa1, 0x61, 0x61, 0x01]).unwrap(), "{\"a\": 1}");
    }

    #[test]
    fn rejects_trailing_bytes() {
        let mut bytes = encode(&7u32).unwrap();
        bytes.push(0x00);
        assert!(decode_exact::<u32>(&bytes).is_err());
    }
}

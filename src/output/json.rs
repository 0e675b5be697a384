//! JSON formatter for summaries; returns bytes.

use serde::Serialize;

/// Pretty JSON bytes of any serialisable value, with a final newline.
pub fn to_json<T: Serialize>(value: &T) -> Result<Vec<u8>, serde_json::Error> {
    let mut v = serde_json::to_vec_pretty(value)?;
    v.push(b'\n');
    Ok(v)
}

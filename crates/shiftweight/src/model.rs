//! The versioned JSON model file: the envelope every saved object shares (format tag, version,
//! body). Each kind of object names its own format tag; the ratio models' is
//! [`crate::ratio::RATIO_MODEL_FORMAT`].
//!
//! ```json
//! {"format": "shiftweight.ratio-model", "version": 1, "model": { ... }}
//! ```
//!
//! Loading checks the format tag and version first and rejects anything else with a clear error,
//! then checks the internal consistency of the model (shapes, finiteness, feature counts). A model
//! file is data only: nothing in it is ever executed. Documents larger than [`MAX_MODEL_BYTES`] are
//! refused before parsing, so a hostile file cannot make the loader allocate without bound.

use crate::error::{Error, Result};
use serde::de::DeserializeOwned;
use serde::{Deserialize, Serialize};
use serde_json::Value;

/// The model-file version this library writes and reads.
pub const MODEL_VERSION: u64 = 1;
/// Largest model document accepted (bytes).
pub const MAX_MODEL_BYTES: usize = 512 * 1024 * 1024;

#[derive(Serialize)]
struct EnvelopeOut<'a, T: Serialize> {
    format: &'a str,
    version: u64,
    model: &'a T,
}

#[derive(Deserialize)]
struct EnvelopeIn {
    format: Option<Value>,
    version: Option<Value>,
    model: Option<Value>,
}

/// Serialises any model under a format tag.
pub fn to_json_tagged<T: Serialize>(format: &str, model: &T) -> Result<String> {
    serde_json::to_string(&EnvelopeOut {
        format,
        version: MODEL_VERSION,
        model,
    })
    .map_err(|e| Error::ModelFile(format!("could not serialise: {e}")))
}

/// Parses a document written by [`to_json_tagged`] with the given format tag.
pub fn from_json_tagged<T: DeserializeOwned>(format: &str, text: &str) -> Result<T> {
    if text.len() > MAX_MODEL_BYTES {
        return Err(Error::ModelFile(format!(
            "document is {} bytes, more than the {MAX_MODEL_BYTES}-byte limit",
            text.len()
        )));
    }
    let env: EnvelopeIn = serde_json::from_str(text).map_err(|e| {
        Error::ModelFile(format!(
            "not a valid JSON model document ({e}); the file may be truncated or corrupted"
        ))
    })?;
    match env.format {
        Some(Value::String(f)) if f == format => {}
        Some(other) => {
            return Err(Error::ModelFile(format!(
                "format is {other}, expected \"{format}\""
            )));
        }
        None => {
            return Err(Error::ModelFile(format!(
                "no \"format\" field; expected \"{format}\""
            )))
        }
    }
    match env.version {
        Some(Value::Number(n)) if n.as_u64() == Some(MODEL_VERSION) => {}
        Some(other) => {
            return Err(Error::ModelFile(format!(
                "version {other} is not supported; this library reads version {MODEL_VERSION}"
            )));
        }
        None => return Err(Error::ModelFile("no \"version\" field".into())),
    }
    let model = env
        .model
        .ok_or_else(|| Error::ModelFile("no \"model\" field".into()))?;
    serde_json::from_value(model)
        .map_err(|e| Error::ModelFile(format!("model body is malformed: {e}")))
}

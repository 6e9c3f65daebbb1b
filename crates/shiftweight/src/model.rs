//! The versioned JSON model file: the envelope every saved object shares (format tag, version,
//! body). Each kind of object names its own format tag; the ratio models' is
//! [`crate::ratio::RATIO_MODEL_FORMAT`].
//!
//! ```json
//! {"format": "shiftweight.ratio-model", "version": 2, "model": { ... }}
//! ```
//!
//! Versions are per format. Ratio models are at version 2, which added the typed-table encoding
//! ([`crate::table::TableEncoding`], optional in the body); version-1 ratio models have no
//! encoding and still load, scoring exactly as before. Every other format is at version 1.
//!
//! Loading checks the format tag and version first and rejects anything else with a clear error,
//! then checks the internal consistency of the model (shapes, finiteness, feature counts). A model
//! file is data only: nothing in it is ever executed. Documents larger than [`MAX_MODEL_BYTES`] are
//! refused before parsing, so a hostile file cannot make the loader allocate without bound.

use crate::error::{Error, Result};
use serde::de::DeserializeOwned;
use serde::{Deserialize, Serialize};
use serde_json::Value;

/// The model-file version of every format except the ratio model (see
/// [`crate::ratio::RATIO_MODEL_VERSION`]).
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

/// Serialises any model under a format tag, at [`MODEL_VERSION`].
pub fn to_json_tagged<T: Serialize>(format: &str, model: &T) -> Result<String> {
    to_json_versioned(format, MODEL_VERSION, model)
}

/// Serialises any model under a format tag and version.
pub fn to_json_versioned<T: Serialize>(format: &str, version: u64, model: &T) -> Result<String> {
    serde_json::to_string(&EnvelopeOut {
        format,
        version,
        model,
    })
    .map_err(|e| Error::ModelFile(format!("could not serialise: {e}")))
}

/// Parses a document written by [`to_json_tagged`] with the given format tag.
pub fn from_json_tagged<T: DeserializeOwned>(format: &str, text: &str) -> Result<T> {
    from_json_versioned(format, &[MODEL_VERSION], text)
}

/// Parses a document with the given format tag whose version is one of `versions` (the last one
/// is the newest, named in the error).
pub fn from_json_versioned<T: DeserializeOwned>(
    format: &str,
    versions: &[u64],
    text: &str,
) -> Result<T> {
    let newest = versions.last().copied().unwrap_or(MODEL_VERSION);
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
        Some(Value::Number(n)) if n.as_u64().is_some_and(|v| versions.contains(&v)) => {}
        Some(other) => {
            let list: Vec<String> = versions.iter().map(u64::to_string).collect();
            return Err(Error::ModelFile(format!(
                "version {other} is not supported; this library reads version {} of \"{format}\" (newest {newest})",
                list.join(" or ")
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

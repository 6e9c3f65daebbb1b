//! Fuzzes the CLI's CSV reader (crates/shiftweight-cli/src/io.rs, compiled in unchanged): any file
//! must give a table whose values are finite with rows x columns entries, or a bad-input / I/O
//! failure with a message; never a panic.
#![no_main]

use libfuzzer_sys::fuzz_target;
use std::io::Write;

/// The two items of the CLI's crate root that its file layer uses.
pub mod exit {
    pub const BAD_INPUT: u8 = 2;
    pub const IO: u8 = 3;
    #[allow(dead_code)]
    pub const INTERNAL: u8 = 4;
}

/// As the CLI's `Failure`.
pub struct Failure {
    pub code: u8,
    pub message: String,
}

impl From<shiftweight::Error> for Failure {
    fn from(e: shiftweight::Error) -> Self {
        Failure {
            code: if e.is_input_error() {
                exit::BAD_INPUT
            } else {
                exit::INTERNAL
            },
            message: e.to_string(),
        }
    }
}

#[allow(dead_code)]
#[path = "../../crates/shiftweight-cli/src/io.rs"]
mod io;

fuzz_target!(|data: &[u8]| {
    // First byte picks the options; the rest is the file.
    let (opts_byte, body) = match data.split_first() {
        Some((b, rest)) => (*b, rest),
        None => (0, data),
    };
    let dir = std::env::temp_dir().join(format!("shiftweight-fuzz-{}", std::process::id()));
    let _ = std::fs::create_dir_all(&dir);
    let path = dir.join("input.csv");
    {
        let mut f = std::fs::File::create(&path).expect("temp file");
        f.write_all(body).expect("write temp file");
    }
    let opts = io::FileOptions {
        format: Some(io::Format::Csv),
        delimiter: if opts_byte & 1 == 0 { b',' } else { b';' },
        drop_missing: opts_byte & 2 != 0,
    };
    let choice = io::ColumnChoice {
        columns: None,
        exclude: if opts_byte & 4 != 0 {
            vec!["label".into()]
        } else {
            Vec::new()
        },
        key: if opts_byte & 8 != 0 {
            Some("id".into())
        } else {
            None
        },
    };
    match io::read_table(&path, &opts, &choice) {
        Ok(t) => {
            assert_eq!(t.values.len(), t.rows * t.names.len());
            assert!(
                t.values.iter().all(|v| v.is_finite()),
                "non-finite value accepted"
            );
            if let Some(k) = &t.keys {
                assert_eq!(k.len(), t.rows);
            }
        }
        Err(f) => {
            assert!(
                f.code == exit::BAD_INPUT || f.code == exit::IO,
                "code {}",
                f.code
            );
            assert!(!f.message.is_empty());
        }
    }
});

//! Options shared by the commands that read tables.

use crate::io::{ColumnChoice, FileOptions, Format};
use crate::read::TypeOverrides;
use clap::Args;

/// How input files are read and which columns are used.
#[derive(Debug, Clone, Args)]
pub struct InputArgs {
    /// Feature columns, by name, comma-separated (default: every column except --exclude and --key).
    #[arg(long, value_delimiter = ',', value_name = "NAMES")]
    pub columns: Option<Vec<String>>,
    /// Columns to leave out (e.g. the label), comma-separated.
    #[arg(long, value_delimiter = ',', value_name = "NAMES")]
    pub exclude: Vec<String>,
    /// A row key column carried verbatim to the weights file (never used as a feature).
    #[arg(long, value_name = "NAME")]
    pub key: Option<String>,
    /// Input format (default: by extension; .parquet/.pq is Parquet, anything else CSV).
    #[arg(long, value_enum)]
    pub format: Option<Format>,
    /// CSV field delimiter: one character, or `tab`.
    #[arg(long, default_value = ",", value_parser = parse_delimiter)]
    pub delimiter: u8,
    /// Columns read as categorical (levels as text), comma-separated; overrides the inferred type.
    #[arg(long, value_delimiter = ',', value_name = "NAMES")]
    pub categorical: Vec<String>,
    /// Columns read as numeric, comma-separated; overrides the inferred type (a value that is
    /// not a number is then an error naming its row).
    #[arg(long, value_delimiter = ',', value_name = "NAMES")]
    pub numeric: Vec<String>,
    /// Skip rows with a missing value in a used column (the count is reported) instead of keeping
    /// them; skipped rows get no weight.
    #[arg(long)]
    pub drop_missing: bool,
}

pub(crate) fn parse_delimiter(s: &str) -> Result<u8, String> {
    match s {
        "tab" | "\\t" | "\t" => Ok(b'\t'),
        _ if s.len() == 1 && s.is_ascii() => Ok(s.as_bytes()[0]),
        _ => Err(format!(
            "the delimiter must be one ASCII character or `tab`, got {s:?}"
        )),
    }
}

impl InputArgs {
    /// File-reading options.
    pub fn file_options(&self) -> FileOptions {
        FileOptions {
            format: self.format,
            delimiter: self.delimiter,
            drop_missing: self.drop_missing,
        }
    }
    /// Column choice.
    pub fn choice(&self) -> ColumnChoice {
        ColumnChoice {
            columns: self.columns.clone(),
            exclude: self.exclude.clone(),
            key: self.key.clone(),
        }
    }
    /// Column types given on the command line.
    pub fn types(&self) -> TypeOverrides {
        TypeOverrides {
            numeric: self.numeric.clone(),
            categorical: self.categorical.clone(),
        }
    }
}

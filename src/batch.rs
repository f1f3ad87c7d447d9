//! A one-shot read of the whole responses file, for `closeout status`: open the file
//! the study names, check its header against the study, and tally every record.

use std::fs::File;

use crate::study::{Study, StudyError};
use crate::tally::{Tally, TallyError, tally_csv_sized};

/// Why the responses could not be read. Bad rows are never an error.
#[derive(Debug, thiserror::Error)]
pub enum ReadError {
    #[error("{path}: cannot open the responses file: {error}; check source.file in {study}")]
    Open {
        path: String,
        study: String,
        error: String,
    },
    #[error("{path}: {error}")]
    Read {
        path: String,
        error: Box<TallyError<StudyError>>,
    },
}

/// Tally the whole file as it is now.
pub fn read(study: &Study) -> Result<Tally, ReadError> {
    let path = study.source.file.display().to_string();
    let file = File::open(&study.source.file).map_err(|e| ReadError::Open {
        path: path.clone(),
        study: study.study_path.display().to_string(),
        error: e.to_string(),
    })?;
    let size = file.metadata().ok().map(|m| m.len());
    let (_, tally) = tally_csv_sized(
        |header| study.layout(header),
        file,
        study.source.delimiter,
        size,
    )
    .map_err(|error| match error {
        // The study's own message already names the file.
        TallyError::Layout(e) => ReadError::Read {
            path: String::new(),
            error: Box::new(TallyError::Layout(e)),
        },
        other => ReadError::Read {
            path: path.clone(),
            error: Box::new(other),
        },
    })?;
    Ok(tally)
}

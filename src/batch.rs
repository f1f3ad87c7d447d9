//! A one-shot read of the whole responses file, for `closeout status`: open the file
//! the study names, check its header against the study, and tally every record.

use std::fs::File;
use std::io::BufReader;

use crate::study::{Study, StudyError};
use crate::tally::{Tally, TallyError, tally_csv};

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
    let (_, tally) = tally_csv(
        |header| study.layout(header),
        BufReader::new(file),
        study.source.delimiter,
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

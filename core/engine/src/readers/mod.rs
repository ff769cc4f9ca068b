//! Input readers: the file's extension picks the reader, every reader returns a dataset in
//! IEC 61217 coordinates (mm) with dose in Gy or percent, or a diagnostic naming the place.

pub mod beam_data;
pub mod csv_data;
pub mod dicom_lengths;
pub mod film_scan;
pub mod rtdose;
pub mod rtplan;

use std::path::Path;

use beamproof_api::Dataset;

use crate::campaign::DicomPlacement;
use crate::diag::Diagnostic;

/// Read a file named outside a campaign (the one-off commands) once, as a regular file of at
/// most the default input limit; the caller parses these bytes.
pub fn read_file(path: &Path) -> Result<Vec<u8>, Diagnostic> {
    crate::input_store::read_regular(path, crate::input_store::DEFAULT_MAX_INPUT_BYTES)
        .map_err(|e| Diagnostic::file(path, format!("cannot read: {e}")).help(e.help()))
}

/// Parse one input file from its bytes. `path` names it in messages (nothing is read from
/// disk); `source` is the path as the campaign names it (kept in the dataset).
pub fn read_dataset(
    path: &Path,
    bytes: &[u8],
    source: &str,
    placement: Option<&DicomPlacement>,
) -> Result<Dataset, Diagnostic> {
    let ext = path
        .extension()
        .and_then(|e| e.to_str())
        .map(str::to_ascii_lowercase)
        .unwrap_or_default();
    let (unit, data) = match ext.as_str() {
        "csv" => {
            let text = std::str::from_utf8(bytes).map_err(|e| {
                Diagnostic::file(path, format!("not UTF-8 text: {e}"))
                    .help("save the CSV file as UTF-8 text")
            })?;
            csv_data::read(path, text)?
        }
        "dcm" => rtdose::read(path, bytes, placement)?,
        _ => {
            return Err(
                Diagnostic::file(path, format!("unknown data file type `.{ext}`"))
                    .help("give a beamproof data CSV (.csv) or a DICOM RT Dose file (.dcm)"),
            );
        }
    };
    if placement.is_some() && ext != "dcm" {
        return Err(Diagnostic::file(
            path,
            "`patient-position` and `isocentre-mm` apply only to DICOM files",
        )
        .help("remove them: CSV data are already in IEC 61217 coordinates"));
    }
    Ok(Dataset {
        source: source.to_string(),
        unit,
        data,
    })
}

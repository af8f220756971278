//! Reading a plan file's bytes: bounded, from regular files only, and decoded as UTF-8 with
//! the first bad byte located by line and column.
//!
//! The size a file system reports is not trusted: devices (`/dev/zero`) and pipes report 0,
//! and a file may grow while it is read. So at most [`MAX_PLAN_BYTES`] + 1 bytes are read
//! whatever the reported size, and one byte more than the cap is an error. Anything but a
//! regular file is refused before it is read: a folder, a device, a socket, and a FIFO, which
//! would otherwise block forever when no writer ever comes (on Linux the file is opened
//! without blocking and its type checked again on the open handle, so a file swapped for a
//! FIFO in between is refused too).

use crate::error::{Error, PlanError};
use std::io::Read;
use std::path::Path;

/// Largest plan file read, bytes (a plan is a page of text, not a data set).
pub const MAX_PLAN_BYTES: u64 = 4 * 1024 * 1024;

/// What kind of file system object a path names, in words, when it is not a regular file.
fn kind_of(file_type: &std::fs::FileType) -> &'static str {
    #[cfg(unix)]
    {
        use std::os::unix::fs::FileTypeExt;
        if file_type.is_fifo() {
            return "a named pipe (FIFO)";
        }
        if file_type.is_char_device() || file_type.is_block_device() {
            return "a device";
        }
        if file_type.is_socket() {
            return "a socket";
        }
    }
    if file_type.is_dir() {
        "a folder"
    } else {
        "not a regular file"
    }
}

fn not_regular(shown: &str, file_type: &std::fs::FileType) -> Error {
    PlanError::at(
        0,
        0,
        "",
        format!("the plan path names {}", kind_of(file_type)),
        "a regular file holding a YAML plan (pipes, devices and folders are not read)",
    )
    .in_file(shown, "")
    .into()
}

fn read_error(path: &Path, source: std::io::Error) -> Error {
    Error::ReadPlan {
        path: path.to_owned(),
        source,
    }
}

/// Opens `path` for reading without ever blocking on a FIFO.
fn open(path: &Path) -> std::io::Result<std::fs::File> {
    let mut options = std::fs::OpenOptions::new();
    options.read(true);
    #[cfg(target_os = "linux")]
    {
        use std::os::unix::fs::OpenOptionsExt;
        options.custom_flags(rustix::fs::OFlags::NONBLOCK.bits() as i32);
    }
    options.open(path)
}

/// Reads a plan file of at most [`MAX_PLAN_BYTES`] as UTF-8 text; `shown` names it in errors.
pub fn read_plan_text(path: &Path, shown: &str) -> Result<String, Error> {
    let metadata = std::fs::metadata(path).map_err(|e| read_error(path, e))?;
    if !metadata.file_type().is_file() {
        return Err(not_regular(shown, &metadata.file_type()));
    }
    let file = open(path).map_err(|e| read_error(path, e))?;
    let handle_type = file
        .metadata()
        .map_err(|e| read_error(path, e))?
        .file_type();
    if !handle_type.is_file() {
        return Err(not_regular(shown, &handle_type));
    }
    let mut bytes = Vec::new();
    file.take(MAX_PLAN_BYTES + 1)
        .read_to_end(&mut bytes)
        .map_err(|e| read_error(path, e))?;
    if bytes.len() as u64 > MAX_PLAN_BYTES {
        return Err(PlanError::at(
            0,
            0,
            "",
            format!("the plan file holds more than {MAX_PLAN_BYTES} bytes"),
            format!("a plan of at most {MAX_PLAN_BYTES} bytes (4 MiB)"),
        )
        .in_file(shown, "")
        .into());
    }
    decode(bytes).map_err(|mut err| {
        // The snippet is already the decodable part of the line.
        err.file = shown.to_owned();
        err.into()
    })
}

/// Decodes plan bytes as UTF-8, or says where the first byte that is not UTF-8 sits.
pub fn decode(bytes: Vec<u8>) -> Result<String, PlanError> {
    String::from_utf8(bytes).map_err(|err| {
        let bytes = err.as_bytes();
        let bad = err.utf8_error().valid_up_to();
        let before = String::from_utf8_lossy(&bytes[..bad]);
        let (line, column, line_start) = position(&before);
        let shown_line: String = before[line_start..].chars().take(200).collect();
        let mut located = PlanError::at(
            line,
            column,
            "",
            format!(
                "the plan is not UTF-8 text: byte 0x{:02X} cannot start or continue a character",
                bytes[bad]
            ),
            "UTF-8 text (save the plan as UTF-8; Latin-1 characters such as µ or ° must be re-encoded)",
        );
        // The text before the bad byte, followed by the replacement character, is the line
        // as far as it can be shown.
        located.source_line = Some(format!("{shown_line}\u{FFFD}"));
        located
    })
}

/// 1-based line and column of the end of `text` (the next character's position), with the
/// byte offset where that line starts. CR, LF and CR LF each end a line, as in YAML.
pub fn position(text: &str) -> (u64, u64, usize) {
    let mut line = 1u64;
    let mut line_start = 0usize;
    let bytes = text.as_bytes();
    let mut i = 0;
    while i < bytes.len() {
        match bytes[i] {
            b'\r' => {
                if bytes.get(i + 1) == Some(&b'\n') {
                    i += 1;
                }
                line += 1;
                line_start = i + 1;
            }
            b'\n' => {
                line += 1;
                line_start = i + 1;
            }
            _ => {}
        }
        i += 1;
    }
    let column = text[line_start..].chars().count() as u64 + 1;
    (line, column, line_start)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::error::nth_line;

    #[test]
    fn lines_end_at_cr_lf_and_crlf_alike() {
        // YAML 1.2 §5.4: CR LF, CR and LF are each a line break (the YAML specification).
        for text in ["a\nbb\nccc", "a\rbb\rccc", "a\r\nbb\r\nccc", "a\rbb\nccc"] {
            assert_eq!(nth_line(text, 1), Some("a"));
            assert_eq!(nth_line(text, 2), Some("bb"));
            assert_eq!(nth_line(text, 3), Some("ccc"));
            assert_eq!(nth_line(text, 4), None);
        }
        assert_eq!(position("a\rbb\r\ncc"), (3, 3, 6));
    }

    #[test]
    fn the_first_byte_that_is_not_utf8_is_located() {
        // 0xFF never occurs in UTF-8 (RFC 3629, section 1).
        let err = decode(b"name: p\nstages:\n  - {name: s\xff}\n".to_vec()).unwrap_err();
        assert_eq!((err.line, err.column), (3, 13));
        assert!(err.problem.contains("0xFF"), "{err}");
        assert!(err.accepted.contains("UTF-8"));
        assert_eq!(err.source_line.as_deref(), Some("  - {name: s\u{FFFD}"));
        // A Latin-1 µ (0xB5) after CR-only line ends.
        let err = decode(b"a: 1\rb: 2 \xb5A\r".to_vec()).unwrap_err();
        assert_eq!((err.line, err.column), (2, 6));
    }
}

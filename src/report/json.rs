//! `report.json`: the report as one JSON document, each record on its own line.
//!
//! The top level and the record lists are indented as usual; each record (a drive point, an
//! intercept, a budget line …) is written on one line. A 4,096-point sweep then reads and
//! diffs line by line and takes about half the bytes of fully indented JSON, while any JSON
//! reader sees the same document.

use super::Report;
use serde::Serialize;
use serde_json::ser::{CharEscape, Formatter};
use std::io::{self, Write};

/// Nesting depth down to which containers are laid out one member per line: the report
/// object (1) and its lists (2). Deeper containers (the records) stay on one line.
const LINED_DEPTH: usize = 2;

/// Streams the report as JSON text (UTF-8, ending in a newline) into `writer`; give it a
/// buffered writer.
pub fn write_json<W: Write>(report: &Report, mut writer: W) -> serde_json::Result<()> {
    let mut serializer =
        serde_json::Serializer::with_formatter(&mut writer, RecordLines::default());
    report.serialize(&mut serializer)?;
    writer
        .write_all(b"\n")
        .and_then(|()| writer.flush())
        .map_err(serde_json::Error::io)
}

/// Indents the outer containers and keeps every deeper one on a single line.
#[derive(Default)]
struct RecordLines {
    /// Containers open, the current one included.
    depth: usize,
    /// Whether the current lined container has a member yet.
    has_member: bool,
}

impl RecordLines {
    fn lined(&self) -> bool {
        self.depth <= LINED_DEPTH
    }

    fn open<W: ?Sized + Write>(&mut self, writer: &mut W, bracket: &[u8]) -> io::Result<()> {
        self.depth += 1;
        self.has_member = false;
        writer.write_all(bracket)
    }

    fn close<W: ?Sized + Write>(&mut self, writer: &mut W, bracket: &[u8]) -> io::Result<()> {
        let lined = self.lined();
        self.depth -= 1;
        if lined && self.has_member {
            writer.write_all(b"\n")?;
            indent(writer, self.depth)?;
        }
        writer.write_all(bracket)
    }

    fn member<W: ?Sized + Write>(&mut self, writer: &mut W, first: bool) -> io::Result<()> {
        if self.lined() {
            writer.write_all(if first { b"\n" } else { b",\n" })?;
            indent(writer, self.depth)
        } else if first {
            Ok(())
        } else {
            writer.write_all(b", ")
        }
    }
}

fn indent<W: ?Sized + Write>(writer: &mut W, depth: usize) -> io::Result<()> {
    for _ in 0..depth {
        writer.write_all(b"  ")?;
    }
    Ok(())
}

impl Formatter for RecordLines {
    fn begin_array<W: ?Sized + Write>(&mut self, writer: &mut W) -> io::Result<()> {
        self.open(writer, b"[")
    }

    fn end_array<W: ?Sized + Write>(&mut self, writer: &mut W) -> io::Result<()> {
        self.close(writer, b"]")
    }

    fn begin_array_value<W: ?Sized + Write>(
        &mut self,
        writer: &mut W,
        first: bool,
    ) -> io::Result<()> {
        self.member(writer, first)
    }

    fn end_array_value<W: ?Sized + Write>(&mut self, _writer: &mut W) -> io::Result<()> {
        self.has_member = true;
        Ok(())
    }

    fn begin_object<W: ?Sized + Write>(&mut self, writer: &mut W) -> io::Result<()> {
        self.open(writer, b"{")
    }

    fn end_object<W: ?Sized + Write>(&mut self, writer: &mut W) -> io::Result<()> {
        self.close(writer, b"}")
    }

    fn begin_object_key<W: ?Sized + Write>(
        &mut self,
        writer: &mut W,
        first: bool,
    ) -> io::Result<()> {
        self.member(writer, first)
    }

    fn begin_object_value<W: ?Sized + Write>(&mut self, writer: &mut W) -> io::Result<()> {
        writer.write_all(b": ")
    }

    fn end_object_value<W: ?Sized + Write>(&mut self, _writer: &mut W) -> io::Result<()> {
        self.has_member = true;
        Ok(())
    }

    fn write_char_escape<W: ?Sized + Write>(
        &mut self,
        writer: &mut W,
        char_escape: CharEscape,
    ) -> io::Result<()> {
        serde_json::ser::CompactFormatter.write_char_escape(writer, char_escape)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The layout must not change the document: serde_json's own reader (the reference)
    /// parses it back to the same value as the library's compact writer produces.
    #[test]
    fn lined_json_is_the_same_document() {
        let value = serde_json::json!({
            "plan": "p",
            "points": [{"a": 1.5, "b": null, "c": [1, 2, {"d": "e\"f"}]}, {"a": -2.0}],
            "empty": [],
            "nested": {"x": {"y": []}},
        });
        let mut bytes = Vec::new();
        let mut serializer =
            serde_json::Serializer::with_formatter(&mut bytes, RecordLines::default());
        value.serialize(&mut serializer).unwrap();
        let text = String::from_utf8(bytes).unwrap();
        let back: serde_json::Value = serde_json::from_str(&text).unwrap();
        assert_eq!(back, value);
        // One record per line inside the lists.
        assert!(
            text.contains("\n    {\"a\": 1.5, \"b\": null, \"c\": [1, 2, {\"d\": \"e\\\"f\"}]},\n"),
            "{text}"
        );
        assert!(text.contains("\"empty\": []"), "{text}");
    }
}

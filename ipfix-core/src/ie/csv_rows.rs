//! A small RFC 4180 CSV reader, shared by `build.rs` (which compiles the IANA
//! registry copy into a table) and the registry tests (which re-read the copy).
//!
//! RFC 4180 §2: fields are separated by commas; a field may be enclosed in
//! double quotes, and then may contain commas, line breaks and doubled
//! quotes (`""` stands for one `"`). Records end with CRLF or LF.
//! Blank lines are skipped; a UTF-8 byte order mark at the start is ignored.

/// Splits `text` into records of fields.
///
/// Returns an error naming the 1-based line when a quoted field is not
/// closed, or when a quote appears inside an unquoted field or right after a
/// closing quote.
pub fn parse(text: &str) -> Result<Vec<Vec<String>>, String> {
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    let mut records = Vec::new();
    let mut record: Vec<String> = Vec::new();
    let mut field = String::new();
    // `quoted`: inside a quoted field; `closed`: a quoted field just ended,
    // so only a separator or line end may follow.
    let mut quoted = false;
    let mut closed = false;
    let mut line = 1_usize;
    let mut chars = text.chars().peekable();
    while let Some(c) = chars.next() {
        if quoted {
            match c {
                '"' if chars.peek() == Some(&'"') => {
                    chars.next();
                    field.push('"');
                }
                '"' => {
                    quoted = false;
                    closed = true;
                }
                '\n' => {
                    line += 1;
                    field.push(c);
                }
                _ => field.push(c),
            }
            continue;
        }
        match c {
            ',' => {
                record.push(std::mem::take(&mut field));
                closed = false;
            }
            '\r' if chars.peek() == Some(&'\n') => {}
            '\n' => {
                let blank = record.is_empty() && field.is_empty() && !closed;
                if !blank {
                    record.push(std::mem::take(&mut field));
                    records.push(std::mem::take(&mut record));
                }
                closed = false;
                line += 1;
            }
            '"' if field.is_empty() && !closed => quoted = true,
            '"' => return Err(format!("line {line}: stray double quote")),
            _ if closed => return Err(format!("line {line}: text after a closing quote")),
            _ => field.push(c),
        }
    }
    if quoted {
        return Err(format!("line {line}: quoted field not closed at end of input"));
    }
    if !field.is_empty() || !record.is_empty() || closed {
        record.push(field);
        records.push(record);
    }
    Ok(records)
}

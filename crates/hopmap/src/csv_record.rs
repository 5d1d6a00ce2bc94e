//! One CSV record split into fields, shared by the screening tables and the reference lists.

/// Splits one CSV record (RFC 4180 quoting: fields in double quotes may hold commas, `""` is a
/// quote). None when a quote is not closed.
pub fn split_csv_record(line: &str) -> Option<Vec<String>> {
    let mut out = Vec::new();
    let mut cur = String::new();
    let mut chars = line.chars().peekable();
    let (mut quoted, mut at_start) = (false, true);
    while let Some(c) = chars.next() {
        if quoted {
            if c == '"' {
                if chars.peek() == Some(&'"') {
                    cur.push('"');
                    chars.next();
                } else {
                    quoted = false;
                }
            } else {
                cur.push(c);
            }
        } else if c == '"' && at_start {
            quoted = true;
            at_start = false;
        } else if c == ',' {
            out.push(std::mem::take(&mut cur).trim().to_string());
            at_start = true;
        } else if !(at_start && c.is_whitespace()) {
            cur.push(c);
            at_start = false;
        }
    }
    if quoted {
        return None;
    }
    out.push(cur.trim().to_string());
    Some(out)
}

//! Quoting user text in messages: at most a short excerpt, so a malformed line of a megabyte
//! does not become a megabyte of error message.

/// Longest excerpt of user text a message quotes, characters.
pub const EXCERPT_CHARS: usize = 80;

/// `s` if it is at most `max_chars` characters, else its first `max_chars` characters followed by
/// `… (N characters)`, the full length.
pub fn excerpt(s: &str, max_chars: usize) -> String {
    let n = s.chars().count();
    if n <= max_chars {
        return s.to_string();
    }
    let head: String = s.chars().take(max_chars).collect();
    format!("{head}… ({n} characters)")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn long_text_is_cut_and_its_length_stated() {
        assert_eq!(excerpt("short", 10), "short");
        let long = "é".repeat(1_000_000);
        let e = excerpt(&long, EXCERPT_CHARS);
        assert!(e.chars().count() < 120, "{}", e.len());
        assert!(e.ends_with("(1000000 characters)"), "{e}");
    }
}

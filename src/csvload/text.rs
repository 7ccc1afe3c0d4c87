//! The wording helpers the load's errors and its report's notes share.

/// Longest excerpt of a cell quoted back in an error or note; cells can be arbitrarily long.
pub(super) const EXCERPT_CHARS: usize = 40;

/// A cell's text shortened for quoting back to the user.
pub(super) fn excerpt(text: &str) -> String {
    if text.chars().count() <= EXCERPT_CHARS {
        text.to_owned()
    } else {
        let mut s: String = text.chars().take(EXCERPT_CHARS).collect();
        s.push('…');
        s
    }
}

pub(super) fn plural(n: usize, noun: &str) -> String {
    if n == 1 {
        format!("1 {noun}")
    } else {
        format!("{n} {noun}s")
    }
}

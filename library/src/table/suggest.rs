//! Near-match suggestions for misspelt names (columns, levels, kinds), and
//! the small English-list helpers the error messages share.
//!
//! Kept apart from the error types so that every error that names something
//! unknown offers the same "perhaps ..." list, computed one way.

/// Up to three candidates close to `wanted`, closest first.
///
/// A candidate is close when it differs only in letter case, when one name
/// starts with the other (at least three letters shared), or when the edit
/// distance is at most a third of the longer name (and at least 1).
pub fn near_matches<'a, I>(wanted: &str, candidates: I) -> Vec<String>
where
    I: IntoIterator<Item = &'a str>,
{
    let wanted_lower = wanted.to_lowercase();
    let mut scored: Vec<(usize, String)> = candidates
        .into_iter()
        .filter(|c| *c != wanted)
        .filter_map(|c| {
            let lower = c.to_lowercase();
            if lower == wanted_lower {
                return Some((0, c.to_string()));
            }
            let shared_prefix = lower.len().min(wanted_lower.len()) >= 3
                && (lower.starts_with(&wanted_lower) || wanted_lower.starts_with(&lower));
            let distance = edit_distance(&lower, &wanted_lower);
            let longest = lower.chars().count().max(wanted_lower.chars().count());
            let allowed = (longest / 3).max(1);
            (distance <= allowed || shared_prefix).then(|| (distance, c.to_string()))
        })
        .collect();
    scored.sort_by(|a, b| a.0.cmp(&b.0).then_with(|| a.1.cmp(&b.1)));
    scored.dedup_by(|a, b| a.1 == b.1);
    scored.into_iter().take(3).map(|(_, c)| c).collect()
}

/// Edit distance counting insertions, deletions, substitutions and swaps
/// of two neighbouring letters (optimal string alignment), so the common
/// typo `girht` is one edit from `girth`.
fn edit_distance(a: &str, b: &str) -> usize {
    let a: Vec<char> = a.chars().collect();
    let b: Vec<char> = b.chars().collect();
    // d[i][j]: distance between the first i letters of a and the first j of b.
    let mut d = vec![vec![0usize; b.len() + 1]; a.len() + 1];
    for (i, row) in d.iter_mut().enumerate() {
        row[0] = i;
    }
    d[0] = (0..=b.len()).collect();
    for i in 1..=a.len() {
        for j in 1..=b.len() {
            let cost = usize::from(a[i - 1] != b[j - 1]);
            let mut best = (d[i - 1][j] + 1).min(d[i][j - 1] + 1).min(d[i - 1][j - 1] + cost);
            if i > 1 && j > 1 && a[i - 1] == b[j - 2] && a[i - 2] == b[j - 1] {
                best = best.min(d[i - 2][j - 2] + 1);
            }
            d[i][j] = best;
        }
    }
    d[a.len()][b.len()]
}

/// Joins items as an English list with `conjunction`: `a`, `a or b`, `a, b or c`.
pub fn join_words<S: AsRef<str>>(items: &[S], conjunction: &str) -> String {
    match items {
        [] => String::new(),
        [one] => one.as_ref().to_string(),
        [rest @ .., last] => {
            let head: Vec<&str> = rest.iter().map(|s| s.as_ref()).collect();
            format!("{} {conjunction} {}", head.join(", "), last.as_ref())
        }
    }
}

/// `perhaps "a" or "b"; ` when something is close, else an empty string.
pub fn perhaps(near: &[String]) -> String {
    if near.is_empty() {
        return String::new();
    }
    let quoted: Vec<String> = near.iter().map(|n| format!("\"{n}\"")).collect();
    format!("perhaps {}; ", join_words(&quoted, "or"))
}

/// `row 5`, `rows 5, 9 and 12`, or `rows 5, 9, 12, 20, 31 and 4 more`.
pub fn row_list(rows: &[usize], total: usize) -> String {
    let shown: Vec<String> = rows.iter().map(|r| r.to_string()).collect();
    match (shown.len(), total.saturating_sub(shown.len())) {
        (1, 0) => format!("row {}", shown[0]),
        (_, 0) => format!("rows {}", join_words(&shown, "and")),
        (_, more) => format!("rows {} and {more} more", shown.join(", ")),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn edit_distance_matches_textbook_example() {
        // kitten -> sitting needs 3 edits: the standard worked example for
        // Levenshtein distance (recalled); no swaps help there.
        assert_eq!(edit_distance("kitten", "sitting"), 3);
        assert_eq!(edit_distance("", "abc"), 3);
        // ca -> abc is 3 under optimal string alignment (it may not edit a
        // swapped pair again), the textbook contrast with Damerau distance 2 (recalled).
        assert_eq!(edit_distance("ca", "abc"), 3);
        assert_eq!(edit_distance("girht", "girth"), 1);
    }

    #[test]
    fn near_matches_prefers_closest() {
        let names = ["girth", "yield", "rootstock", "visits"];
        assert_eq!(near_matches("girht", names), vec!["girth".to_string()]);
        assert_eq!(near_matches("ROOTSTOCK", names), vec!["rootstock".to_string()]);
        assert!(near_matches("zzz", names).is_empty());
    }

    #[test]
    fn row_list_reads_as_english() {
        assert_eq!(row_list(&[5], 1), "row 5");
        assert_eq!(row_list(&[5, 9, 12], 3), "rows 5, 9 and 12");
        assert_eq!(row_list(&[5, 9], 6), "rows 5, 9 and 4 more");
    }
}

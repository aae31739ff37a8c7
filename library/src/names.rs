//! Near-match suggestions for error messages: the Levenshtein distance that
//! graph, model and cell errors use to say "did you mean …?".
//! (`table` uses its own variant that also counts swapped neighbours.)

/// Levenshtein distance (insertions, deletions, substitutions) between two
/// strings, counted in characters.
pub fn edit_distance(a: &str, b: &str) -> usize {
    let b: Vec<char> = b.chars().collect();
    let mut row: Vec<usize> = (0..=b.len()).collect();
    for (i, ca) in a.chars().enumerate() {
        let mut diagonal = row[0];
        row[0] = i + 1;
        for (j, &cb) in b.iter().enumerate() {
            let above = row[j + 1];
            row[j + 1] = (above + 1).min(row[j] + 1).min(diagonal + usize::from(ca != cb));
            diagonal = above;
        }
    }
    row[b.len()]
}

#[cfg(test)]
mod tests {
    use super::edit_distance;

    #[test]
    fn edit_distance_matches_textbook_examples() {
        // Levenshtein (1966) distance; kitten/sitting = 3 is the classic worked example (recalled).
        assert_eq!(edit_distance("kitten", "sitting"), 3);
        assert_eq!(edit_distance("", "abc"), 3);
        assert_eq!(edit_distance("yeild", "yield"), 2);
    }
}

//! The minimiser: delta debugging (Zeller & Hildebrandt 2002, "Simplifying and isolating
//! failure-inducing input", IEEE TSE 28(2)) by lines, then by bytes. It removes ever smaller chunks
//! while the input still fails the same way, and gives up after a budget of executions.

/// Shrinks `input` while `still_fails` holds, spending at most `budget` calls of it. The result still
/// fails (it is `input` itself if nothing could be removed).
pub fn minimise(
    input: &[u8],
    mut still_fails: impl FnMut(&[u8]) -> bool,
    budget: usize,
) -> Vec<u8> {
    let mut calls = 0;
    let lines = split_lines(input);
    let lines = ddmin(lines, &mut still_fails, budget, &mut calls);
    let bytes: Vec<Vec<u8>> = lines.concat().into_iter().map(|b| vec![b]).collect();
    ddmin(bytes, &mut still_fails, budget, &mut calls).concat()
}

fn split_lines(input: &[u8]) -> Vec<Vec<u8>> {
    input
        .split_inclusive(|&b| b == b'\n')
        .map(<[u8]>::to_vec)
        .collect()
}

/// Removes chunks of `units` (complements of the ddmin algorithm) while the rest still fails.
fn ddmin(
    mut units: Vec<Vec<u8>>,
    still_fails: &mut impl FnMut(&[u8]) -> bool,
    budget: usize,
    calls: &mut usize,
) -> Vec<Vec<u8>> {
    let mut n = 2usize;
    while !units.is_empty() {
        let len = units.len();
        let chunk = len.div_ceil(n.min(len));
        let mut reduced = false;
        let mut start = 0;
        while start < len {
            if *calls >= budget {
                return units;
            }
            let end = (start + chunk).min(len);
            let candidate: Vec<u8> = units[..start]
                .iter()
                .chain(&units[end..])
                .flatten()
                .copied()
                .collect();
            *calls += 1;
            if still_fails(&candidate) {
                units.drain(start..end);
                n = n.saturating_sub(1).max(2);
                reduced = true;
                break;
            }
            start = end;
        }
        if !reduced {
            if chunk == 1 {
                break;
            }
            n = (2 * n).min(len);
        }
    }
    units
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn shrinks_to_the_failing_core() {
        // Fails whenever the input holds `X` somewhere before `Y`.
        let fails = |s: &[u8]| {
            let x = s.iter().position(|&b| b == b'X');
            let y = s.iter().rposition(|&b| b == b'Y');
            matches!((x, y), (Some(a), Some(b)) if a < b)
        };
        let input = b"line one\nsome X here\nmore\nand Y there\nend\n";
        assert!(fails(input));
        assert_eq!(minimise(input, fails, 10_000), b"XY");
    }

    #[test]
    fn keeps_an_input_that_cannot_shrink_and_respects_the_budget() {
        let fails = |s: &[u8]| s == b"ab";
        assert_eq!(minimise(b"ab", fails, 100), b"ab");
        let mut calls = 0;
        let out = minimise(
            &[b'a'; 1000],
            |s| {
                calls += 1;
                s.len() > 3
            },
            50,
        );
        assert!(calls <= 50);
        assert!(out.len() > 3);
    }
}

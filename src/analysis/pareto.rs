//! Pareto (non-dominated) points of two objectives, both to be minimised.

/// For each point, whether no other point is at least as good in both objectives and strictly
/// better in one (Pareto optimality). Points with a non-finite coordinate are never on the front
/// and dominate nothing. Sort-and-sweep, O(n log n).
pub fn non_dominated(points: &[(f64, f64)]) -> Vec<bool> {
    let mut order: Vec<usize> = (0..points.len())
        .filter(|&i| points[i].0.is_finite() && points[i].1.is_finite())
        .collect();
    order.sort_by(|&a, &b| {
        points[a]
            .0
            .total_cmp(&points[b].0)
            .then(points[a].1.total_cmp(&points[b].1))
    });
    let mut front = vec![false; points.len()];
    // Lowest second objective among points with a strictly smaller first objective.
    let mut best_before = f64::INFINITY;
    let mut k = 0;
    while k < order.len() {
        // The points sharing this first objective: only those with the group's least second
        // objective can be optimal, and only if it beats every point to their left.
        let x = points[order[k]].0;
        let mut end = k;
        while end < order.len() && points[order[end]].0 == x {
            end += 1;
        }
        let least = points[order[k]].1;
        if least < best_before {
            for &i in &order[k..end] {
                front[i] = points[i].1 == least;
            }
        }
        best_before = best_before.min(least);
        k = end;
    }
    front
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The definition itself, point against point.
    fn brute(points: &[(f64, f64)]) -> Vec<bool> {
        let ok = |p: &(f64, f64)| p.0.is_finite() && p.1.is_finite();
        points
            .iter()
            .map(|p| {
                ok(p)
                    && !points
                        .iter()
                        .any(|q| ok(q) && q.0 <= p.0 && q.1 <= p.1 && (q.0 < p.0 || q.1 < p.1))
            })
            .collect()
    }

    #[test]
    fn front_of_a_small_set() {
        let p = [
            (1.0, 5.0),
            (2.0, 3.0),
            (3.0, 4.0),
            (4.0, 1.0),
            (2.0, 3.0),
            (5.0, 1.0),
        ];
        assert_eq!(
            non_dominated(&p),
            [true, true, false, true, true, false],
            "duplicates are both optimal; (5, 1) is dominated by (4, 1)"
        );
    }

    #[test]
    fn agrees_with_the_definition_on_random_sets() {
        let mut s = 12345u64;
        let mut next = || {
            s = s
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            ((s >> 33) % 7) as f64
        };
        for _ in 0..200 {
            let mut pts: Vec<(f64, f64)> = (0..15).map(|_| (next(), next())).collect();
            pts.push((f64::NAN, 0.0));
            assert_eq!(non_dominated(&pts), brute(&pts), "{pts:?}");
        }
    }
}

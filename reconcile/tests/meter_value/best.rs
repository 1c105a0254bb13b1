//! The best k additions: the best single addition is the candidate table's best; every
//! subset tried is at least as good as the greedy choice; and the chosen set's σ, by chained
//! low-rank updates, is the σ of a fresh estimate with all of them in the model.

use reconcile::analyse_period;
use reconcile::meter_value::{
    best_additions, candidate_worths, candidates, meter_worths, search_additions, Accuracies,
    Additions, Search, WeightedFigure,
};
use reconcile::report::Figure;
use testkit::period;

use crate::{figure_of, same_sigma, with_candidate};

/// The measure the search minimises: figures left unobservable, then Σ w (σ/σ_now)².
fn measure(goal: &[(WeightedFigure, Figure)], a: &Additions) -> (usize, f64) {
    let mut m = (0, 0.0);
    for ((f, now), after) in goal.iter().zip(&a.sigma_after) {
        match after {
            None => m.0 += 1,
            Some(s) => m.1 += f.weight * (s / now.sigma.unwrap()).powi(2),
        }
    }
    m
}

#[test]
fn the_best_additions_are_the_tables_best_and_no_worse_than_greedy_and_exact() {
    let (plant, z, values) = crate::vantle_exact();
    let base = analyse_period(&plant, &period(values.clone()));
    let est = base.estimate.as_ref().unwrap();
    let cands = candidates(&plant, est, &Accuracies::default());
    let figures: Vec<&Figure> = base
        .report
        .figures
        .iter()
        .filter(|f| f.sigma.is_some())
        .collect();
    let weighted = |f: &Figure, weight: f64| {
        let w = WeightedFigure {
            name: f.name.clone(),
            subject: f.subject.clone(),
            weight,
        };
        (w, meter_worths(&plant, est, &f.name, &f.subject).unwrap().0)
    };

    // One figure, one addition: the candidate of smallest σ in the table, every one tried.
    let one = vec![weighted(figures[0], 1.0)];
    let best = best_additions(&plant, est, &cands, &one, 1);
    assert_eq!(best.search, Search::Exhaustive);
    assert_eq!(best.evaluated, cands.len());
    let table = candidate_worths(&plant, est, &one[0].0.name, &one[0].0.subject, &cands).unwrap();
    let smallest = table
        .iter()
        .min_by(|a, b| {
            a.sigma_if_added
                .unwrap()
                .total_cmp(&b.sigma_if_added.unwrap())
        })
        .unwrap();
    assert_eq!(best.sigma_after[0], smallest.sigma_if_added);

    // Two figures weighted 3:1, two additions.
    let two = vec![
        weighted(figures[0], 3.0),
        weighted(figures[figures.len() / 2], 1.0),
    ];
    let exhaustive = search_additions(&plant, est, &cands, &two, 2, Search::Exhaustive);
    let greedy = search_additions(&plant, est, &cands, &two, 2, Search::Greedy);
    assert_eq!(exhaustive.evaluated, cands.len() * (cands.len() - 1) / 2);
    assert!(greedy.evaluated < exhaustive.evaluated);
    let (me, mg) = (measure(&two, &exhaustive), measure(&two, &greedy));
    assert!(
        me.0 <= mg.0 && me.1 <= mg.1 * (1.0 + 1e-12),
        "{me:?} against greedy {mg:?}"
    );
    assert!(me.1 < 3.0 + 1.0, "the additions narrow σ: {me:?}");

    // The exhaustive set in the model, estimated afresh.
    let (p1, v1) = with_candidate(&plant, &values, &z, &cands[exhaustive.chosen[0]]);
    let (p2, v2) = with_candidate(&p1, &v1, &z, &cands[exhaustive.chosen[1]]);
    let fresh = analyse_period(&p2, &period(v2)).report;
    for ((f, _), after) in two.iter().zip(&exhaustive.sigma_after) {
        let what = format!("{} {} with the best two", f.name, f.subject);
        same_sigma(*after, figure_of(&fresh, &f.name, &f.subject), &what);
    }
}

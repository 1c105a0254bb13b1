//! The Vantle Cross methanol loop (tests/data/vantle-methanol.toml): two reactions on one
//! converter, a flash, a let-down vessel, a purge splitter and a recycle, 15 streams, six
//! components and 26 meters of every kind and many units.

use reconcile::equations::{constraints, Layout};
use reconcile::{parse_plant, reconcile_period, ReportStatus};
use testkit::plants::VANTLE;
use testkit::{exact_values, period, vantle_true_state, VantleConditions};

#[test]
fn true_state_satisfies_every_balance() {
    let plant = parse_plant(VANTLE).unwrap();
    let layout = Layout::new(&plant);
    let z = vantle_true_state(&plant, &layout, &VantleConditions::default());
    let g = constraints(&plant, &layout, &z, None);
    let worst = g.iter().fold(0.0_f64, |a, x| a.max(x.abs()));
    assert!(worst < 1e-8, "largest balance residual {worst} kmol/h");
    assert!(z.iter().all(|&v| v >= 0.0));
}

#[test]
fn noise_free_loop_reconciles_to_itself() {
    let plant = parse_plant(VANTLE).unwrap();
    let layout = Layout::new(&plant);
    // States: 72 component flows (makeup 4, CO2 feed 1, fresh gas 4, loop-gas, conv-feed,
    // conv-out, interchanger-out, flash-feed 6 each, crude 4, flash-gas, purge, loop-return,
    // recycle 6 each, let-down gas 2, crude product 3), 2 extents and 1 split fraction = 75.
    // Equations: balances feed-mix 4, loop-mix 6, fe-cold 6, conv 6, fe-hot 6, final-cooler 6,
    // flash 6, purge-split 6, circulator 6, letdown 4, plus 6 splitter rows = 62, independent.
    // Degrees of freedom 75 − 62 = 13: makeup 4, CO2 feed 1, two extents, the flash split of
    // CO2, CH3OH, H2O and CH4, the let-down split of CO2, and the purge fraction.
    // With every state observable rank(J N) = 13, so with 28 meters the redundancy is
    // ν = 28 − 13 = 15.
    assert_eq!(layout.n, 75);
    assert_eq!(layout.rows.len(), 62);
    let z = vantle_true_state(&plant, &layout, &VantleConditions::default());
    let values = exact_values(&plant, &layout, &z);
    for v in &values {
        println!(
            "{:12} {:>14.6} {}",
            plant.meters[v.meter].tag, v.value, plant.meters[v.meter].uom
        );
    }
    let report = reconcile_period(&plant, &period(values));
    assert_eq!(
        report.status,
        ReportStatus::Solved,
        "{:?} {:?}",
        report.warnings,
        report.unobservable
    );
    assert_eq!(plant.meters.len(), 28);
    assert_eq!(report.redundancy, 15);
    assert!(
        report.objective.unwrap() < 1e-12,
        "objective {:?}",
        report.objective
    );
    for m in &report.meters {
        let measured = m.measured.unwrap();
        assert!(
            m.adjustment.unwrap().abs() <= 1e-7 * measured.abs().max(1.0),
            "{}",
            m.tag
        );
    }
    for s in &report.streams {
        assert!(s.observable, "stream {}", s.id);
        let i = plant.stream_index(&s.id).unwrap();
        let truth: f64 = z[layout.stream_flows(&plant, i)].iter().sum();
        assert!(
            (s.molar_flow.unwrap() - truth).abs() <= 1e-7 * truth.max(1.0),
            "stream {}",
            s.id
        );
    }
    for (r, e) in report.extents.iter().enumerate() {
        assert!(e.observable, "extent {}", e.reaction);
        let truth = z[layout.extent(r)];
        assert!(
            (e.value.unwrap() - truth).abs() <= 1e-7 * truth,
            "extent {}",
            e.reaction
        );
    }
    assert!(
        report.meters.iter().all(|m| m.redundant),
        "every Vantle meter is redundant"
    );
    assert!(report.unobservable.is_empty(), "{:?}", report.unobservable);
}

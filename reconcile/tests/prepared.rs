//! A model revision prepared once (`reconcile::Prepared`) and kept across its periods gives
//! each period exactly the report of the period analysed alone: the Vantle loop over periods
//! of varied noise, with a meter missing in some (another KKT pattern) and a gross error in
//! one (restarts and identification).

use reconcile::equations::Layout;
use reconcile::period::MeterValue;
use reconcile::{analyse_period_prepared, parse_plant, reconcile_period, Cancel, Prepared};
use testkit::plants::VANTLE;
use testkit::{exact_values, noisy_values, period, vantle_true_state, VantleConditions};

#[test]
fn a_prepared_revision_kept_across_periods_gives_each_period_its_own_report() {
    let plant = parse_plant(VANTLE).expect("the Vantle model is valid");
    let layout = Layout::new(&plant);
    let exact = exact_values(
        &plant,
        &layout,
        &vantle_true_state(&plant, &layout, &VantleConditions::default()),
    );
    let mut prepared = Prepared::new(&plant);
    let mut restarted = 0;
    for seed in 0..24u64 {
        let mut values: Vec<MeterValue> = noisy_values(&plant, &exact, seed);
        // Every fourth period lacks a meter: the KKT pattern changes and changes back.
        if seed % 4 == 1 {
            values.remove((seed as usize * 5) % values.len());
        }
        // One period with a gross error of 8σ on the make-up flow meter.
        if seed == 10 {
            let sigma = plant.meters[values[0].meter]
                .sigma_for(values[0].value)
                .expect("positive σ");
            values[0].value += 8.0 * sigma;
        }
        let input = period(values);
        let alone = reconcile_period(&plant, &input);
        let kept = analyse_period_prepared(&plant, &mut prepared, &input, &Cancel::never())
            .expect("no deadline")
            .report;
        restarted += usize::from(alone.diagnostics.as_ref().is_some_and(|d| d.restarts > 0));
        assert_eq!(
            serde_json::to_string(&kept).expect("a report serialises"),
            serde_json::to_string(&alone).expect("a report serialises"),
            "seed {seed}"
        );
    }
    // The restarts ran in some period, so their share of the analysis was compared too.
    assert!(restarted >= 1, "no period restarted");
}

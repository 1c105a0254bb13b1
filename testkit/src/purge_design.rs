//! The operating cases of the purge-design loop (`tests/data/purge-design.toml`), as the
//! simulator's specifications.
//!
//! The numbers are chosen for the tests, not taken from a plant or a publication: a fresh feed
//! of 375 mol/s of N2 and H2 in stoichiometric ratio (1:3) carrying 0.8 mol % argon, 50 %
//! single-pass conversion of N2, complete removal of the ammonia, and 5 % of the separator gas
//! purged ([`DESIGN`], the case the service's end-to-end tests run) or 20 %
//! ([`LARGE_PURGE`]). The steady state each gives is derived by hand, as a closed-form mass
//! balance, in reconcile/tests/purge_design.rs, which checks the simulator and the reconciled
//! loop figures against it.

use reconcile::simulate::Spec;

/// kmol/h (the engine's unit) per mol/s (the model's meters).
pub const MOL_S: f64 = 3.6;

/// The plant's name in the model.
pub const PLANT: &str = "purge-design";

/// One operating case of the loop.
#[derive(Debug, Clone, Copy)]
pub struct Operating {
    /// Fresh feed F, mol/s.
    pub feed: f64,
    /// Mole fraction y_I of argon in the fresh feed; the rest is N2:H2 = 1:3.
    pub inert_fraction: f64,
    /// Single-pass conversion X of N2 (the key reactant).
    pub conversion: f64,
    /// Purge fraction φ: the share of the separator gas that leaves by the purge.
    pub purge_fraction: f64,
}

/// The design case: the one the end-to-end tests simulate.
pub const DESIGN: Operating = Operating {
    feed: 375.0,
    inert_fraction: 0.008,
    conversion: 0.5,
    purge_fraction: 0.05,
};

/// The same feed and conversion with four times the purge.
pub const LARGE_PURGE: Operating = Operating {
    purge_fraction: 0.20,
    ..DESIGN
};

impl Operating {
    /// Fresh-feed component flows (mol/s) of N2, H2 and argon.
    pub fn fresh(&self) -> [(&'static str, f64); 3] {
        let reactants = (1.0 - self.inert_fraction) * self.feed;
        [
            ("N2", reactants / 4.0),
            ("H2", 3.0 * reactants / 4.0),
            ("Ar", self.inert_fraction * self.feed),
        ]
    }

    /// The simulator's specifications of this case (values in kmol/h): the fresh feed's
    /// component flows, the single-pass conversion and the purge's split fraction.
    pub fn specs(&self) -> Vec<Spec> {
        let mut specs: Vec<Spec> = self
            .fresh()
            .into_iter()
            .map(|(c, v)| Spec::ComponentFlow {
                stream: "feed".into(),
                component: c.into(),
                value: v * MOL_S,
            })
            .collect();
        specs.push(Spec::Conversion {
            reaction: "synthesis".into(),
            value: self.conversion,
        });
        specs.push(Spec::SplitFraction {
            stream: "purge".into(),
            value: self.purge_fraction,
        });
        specs
    }
}

/// The design case's specifications.
pub fn specs() -> Vec<Spec> {
    DESIGN.specs()
}

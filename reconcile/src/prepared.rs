//! What a model revision's periods share: made once per revision and kept by the caller
//! (the service per revision, `loopbal reconcile` per file), so that a period builds only what
//! its readings change.
//!
//! - the layout of the state and its constraint rows;
//! - the structural zeros (crate::structural_zeros), held at zero in every solve through the
//!   solve's own copy of the layout's bounds;
//! - the symbolic analysis of the KKT matrix (its compressed pattern, the fill-reducing
//!   ordering and elimination tree of its LDLᵀ, the LU's ordering), whose pattern depends
//!   only on the model and on which meters have a value: periods with the same meters
//!   refactorise numerically in place, a period with another set analyses its pattern anew.
//!
//! Keeping it changes no answer: every piece is a deterministic function of the model (and,
//! for the analysis, of the pattern it checks before reuse), so a period analysed with a
//! [`Prepared`] kept across periods gives the report of one made for it alone.

use crate::equations::Layout;
use crate::model::Plant;
use crate::sparse::Symbolic;
use crate::structural_zeros::structural_zeros;

/// A model revision prepared for its periods. Made by [`Prepared::new`] for one [`Plant`];
/// given another plant, the analysis notices (its sizes differ) and prepares that one
/// instead.
pub struct Prepared {
    /// The model's layout, as the estimate reports it.
    pub(crate) layout: Layout,
    /// The same with the structural zeros' upper bound at zero: what the solve works on.
    pub(crate) solve_layout: Layout,
    /// `true` at each structural zero.
    pub(crate) structural_zero: Vec<bool>,
    /// The KKT matrix's symbolic analysis, left by the last solve.
    pub(crate) kkt: Option<Symbolic>,
    /// Whether the structural zeros are held (always, but in tests that compare).
    hold_zeros: bool,
    /// What identifies the plant this was made for: its streams, units, reactions, meters
    /// and component flows.
    shape: [usize; 5],
}

impl Prepared {
    /// Prepare `plant`'s revision: its layout and structural zeros now, the KKT analysis at
    /// the first solve.
    pub fn new(plant: &Plant) -> Prepared {
        Prepared::with_zeros(plant, true)
    }

    /// `hold_zeros` false: the structural zeros are found but left free, as the solve had
    /// them before they were held (for the tests that compare the two).
    pub(crate) fn with_zeros(plant: &Plant, hold_zeros: bool) -> Prepared {
        let layout = Layout::new(plant);
        let structural_zero = if hold_zeros {
            structural_zeros(plant, &layout)
        } else {
            vec![false; layout.n]
        };
        let mut solve_layout = layout.clone();
        for (i, &zero) in structural_zero.iter().enumerate() {
            if zero {
                solve_layout.upper[i] = 0.0;
            }
        }
        Prepared {
            hold_zeros,
            shape: shape(plant),
            layout,
            solve_layout,
            structural_zero,
            kkt: None,
        }
    }

    /// The model's layout.
    pub fn layout(&self) -> &Layout {
        &self.layout
    }

    /// The states held at zero because no path brings their component.
    pub fn structural_zeros(&self) -> impl Iterator<Item = usize> + '_ {
        (0..self.layout.n).filter(|&i| self.structural_zero[i])
    }

    /// Made anew when `plant` is not the plant this was prepared for.
    pub(crate) fn ensure_for(&mut self, plant: &Plant) {
        if shape(plant) != self.shape {
            *self = Prepared::with_zeros(plant, self.hold_zeros);
        }
    }
}

impl std::fmt::Debug for Prepared {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Prepared")
            .field("states", &self.layout.n)
            .field("structural_zeros", &self.structural_zeros().count())
            .field("kkt_analysed", &self.kkt.is_some())
            .finish()
    }
}

fn shape(plant: &Plant) -> [usize; 5] {
    [
        plant.streams.len(),
        plant.units.len(),
        plant.reactions.len(),
        plant.meters.len(),
        plant.streams.iter().map(|s| s.components.len()).sum(),
    ]
}

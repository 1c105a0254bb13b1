//! Drawing cases from the seed, and each family's count against its time budget.

use super::*;

pub(crate) fn seed() -> u64 {
    match std::env::var(SEED_VAR) {
        Ok(s) => s
            .trim()
            .parse()
            .unwrap_or_else(|_| panic!("{SEED_VAR}={s:?} is not an unsigned integer")),
        Err(_) => DEFAULT_SEED,
    }
}

/// `count` values of `strategy`, drawn deterministically from the seed and the family's name.
pub(crate) fn generate<S: Strategy>(family: &str, count: usize, strategy: S) -> Vec<S::Value> {
    let seed = seed();
    let mut key = [0u8; 32];
    key[..8].copy_from_slice(&seed.to_le_bytes());
    for (i, b) in family.bytes().enumerate() {
        key[8 + i % 24] ^= b;
    }
    let rng = TestRng::from_seed(RngAlgorithm::ChaCha, &key);
    let mut runner = TestRunner::new_with_rng(Config::default(), rng);
    eprintln!("hostile {family}: {count} cases from seed {seed} ({SEED_VAR} draws others)");
    (0..count)
        .map(|_| {
            strategy
                .new_tree(&mut runner)
                .expect("draw a case")
                .current()
        })
        .collect()
}

/// A family's count of cases against its time budget.
pub(crate) struct Budget {
    pub(crate) family: &'static str,
    pub(crate) start: Instant,
    pub(crate) planned: usize,
    pub(crate) ran: usize,
    pub(crate) tally: BTreeMap<u16, usize>,
}

impl Budget {
    pub(crate) fn new(family: &'static str, planned: usize) -> Budget {
        Budget {
            family,
            start: Instant::now(),
            planned,
            ran: 0,
            tally: BTreeMap::new(),
        }
    }

    pub(crate) fn spent(&self) -> bool {
        self.start.elapsed() > FAMILY_BUDGET
    }

    pub(crate) fn count(&mut self, status: u16) {
        self.ran += 1;
        *self.tally.entry(status).or_default() += 1;
    }

    pub(crate) fn done(self) {
        let stopped = if self.ran < self.planned {
            " (stopped at the time budget)"
        } else {
            ""
        };
        eprintln!(
            "hostile {}: {} of {} cases in {:.1} s{stopped}; answers {:?}",
            self.family,
            self.ran,
            self.planned,
            self.start.elapsed().as_secs_f64(),
            self.tally
        );
        assert!(
            self.ran >= self.planned.min(MIN_CASES),
            "{}: only {} cases within {FAMILY_BUDGET:?}",
            self.family,
            self.ran
        );
    }
}

/// What a failure message says about a case: enough to find it again.
pub(crate) fn describe(family: &str, i: usize, case: &dyn std::fmt::Debug, body: &[u8]) -> String {
    let mut drawn = format!("{case:?}");
    if drawn.len() > 1500 {
        let cut = (0..=1500)
            .rev()
            .find(|&n| drawn.is_char_boundary(n))
            .unwrap_or(0);
        drawn.truncate(cut);
        drawn.push_str("...");
    }
    format!(
        "{family} case {i} (seed {}): {drawn}; body {}",
        seed(),
        preview(body)
    )
}

pub(crate) fn preview(bytes: &[u8]) -> String {
    let shown: String = bytes
        .iter()
        .take(300)
        .flat_map(|b| std::ascii::escape_default(*b))
        .map(char::from)
        .collect();
    let more = if bytes.len() > 300 { "..." } else { "" };
    format!("of {} bytes b\"{shown}\"{more}", bytes.len())
}

/// One family's cases, drawn from the seed, with its count against the time budget: the loop
/// every family runs is `while let Some((i, case)) = family.next() { ...; family.count(status) }`
/// and then `family.done()`, which prints the tally and checks the minimum count.
pub(crate) struct Family<T> {
    name: &'static str,
    cases: std::iter::Enumerate<std::vec::IntoIter<T>>,
    budget: Budget,
}

impl<T: std::fmt::Debug> Family<T> {
    /// `count` cases of `strategy` for the family `name` (see `generate`).
    pub(crate) fn draw<S: Strategy<Value = T>>(
        name: &'static str,
        count: usize,
        strategy: S,
    ) -> Family<T> {
        let cases = generate(name, count, strategy);
        Family {
            name,
            budget: Budget::new(name, cases.len()),
            cases: cases.into_iter().enumerate(),
        }
    }

    /// The next case and its number, until the cases or the time budget run out.
    pub(crate) fn next(&mut self) -> Option<(usize, T)> {
        if self.budget.spent() {
            return None;
        }
        self.cases.next()
    }

    /// What a failure message says about case `i` sent as `body` (`describe`).
    pub(crate) fn describe(&self, i: usize, case: &T, body: &[u8]) -> String {
        describe(self.name, i, case, body)
    }

    /// Count a case sent, by the status of its answer.
    pub(crate) fn count(&mut self, status: u16) {
        self.budget.count(status);
    }

    pub(crate) fn done(self) {
        self.budget.done();
    }
}

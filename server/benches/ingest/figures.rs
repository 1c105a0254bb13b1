//! The result table: one row a case, and the backends side by side.

use std::time::Duration;

use crate::TARGET;

/// One row of the result table.
pub struct Figure {
    pub case: &'static str,
    pub what: &'static str,
    pub rows: usize,
    pub elapsed: Duration,
    /// Slowest single batch, where the case is timed per batch.
    pub slowest: Option<Duration>,
}

impl Figure {
    pub fn rate(&self) -> f64 {
        self.rows as f64 / self.elapsed.as_secs_f64()
    }
}

pub fn print_figures(title: &str, figures: &[Figure]) {
    println!("{title}");
    println!(
        "{:<22} {:>9} {:>10} {:>14} {:>13}  what",
        "case", "readings", "seconds", "readings/s", "slowest batch"
    );
    for f in figures {
        println!(
            "{:<22} {:>9} {:>10.3} {:>14.0} {:>13}  {}",
            f.case,
            f.rows,
            f.elapsed.as_secs_f64(),
            f.rate(),
            f.slowest
                .map_or("-".into(), |d| format!("{:.1} ms", d.as_secs_f64() * 1e3)),
            f.what
        );
    }
    let rate = |case: &str| figures.iter().find(|f| f.case == case).map(Figure::rate);
    let http_new = figures[0].rate();
    println!(
        "target: HTTP ingestion of new readings >= {TARGET:.0} readings/s: {} ({http_new:.0}/s; \
         {:.0} % of the store called directly, {:.0} % of the raw 500-row INSERT)",
        if http_new >= TARGET { "met" } else { "NOT met" },
        100.0 * http_new / rate("store direct").unwrap_or(f64::NAN),
        100.0 * http_new / rate("raw insert, 500/stmt").unwrap_or(f64::NAN)
    );
}

/// The readings per second of every case, one column per backend.
pub fn print_side_by_side(results: &[(&str, Vec<Figure>)]) {
    println!();
    print!("{:<22}", "readings/s");
    for (label, _) in results {
        print!(" {label:>12}");
    }
    println!(" {:>8}", "ratio");
    let mut cases: Vec<&str> = Vec::new();
    for (_, figures) in results {
        for f in figures {
            if !cases.contains(&f.case) {
                cases.push(f.case);
            }
        }
    }
    for case in cases {
        print!("{case:<22}");
        let rates: Vec<Option<f64>> = results
            .iter()
            .map(|(_, figures)| figures.iter().find(|f| f.case == case).map(Figure::rate))
            .collect();
        for r in &rates {
            match r {
                Some(r) => print!(" {r:>12.0}"),
                None => print!(" {:>12}", "-"),
            }
        }
        match (
            rates.first().copied().flatten(),
            rates.last().copied().flatten(),
        ) {
            (Some(a), Some(b)) if rates.len() > 1 => println!(" {:>8.2}", b / a),
            _ => println!(" {:>8}", "-"),
        }
    }
    println!("(ratio: last column over the first)");
}

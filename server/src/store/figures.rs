//! Loop figures kept in columns (`period_figures`, migrations/0005): each period's current run's
//! figures, one row each, written with the run, and read back as series over a range without
//! opening the stored reports.

use chrono::{DateTime, Utc};
use reconcile::report::Figure;

use super::rows::{self, FigureCell, FigureKey, PeriodOutcome, PlantRow};
use super::values::{param_list, value_rows, Millis};
use super::{Result, Store, Tx};

/// Rows of one multi-row insert: 9 parameters each, well within both backends' limits.
const ROWS_PER_INSERT: usize = 100;

/// Replace the figures of each run's period with the run's (its period start, its id, its
/// figures; inside the runs' transaction): one delete for all the periods, and the rows in
/// multi-row inserts.
pub(super) async fn write(
    tx: &mut Tx,
    plant: &PlantRow,
    runs: &[(Millis, i64, &[Figure])],
) -> Result<()> {
    for chunk in runs.chunks(ROWS_PER_INSERT) {
        let sql = format!(
            "DELETE FROM period_figures WHERE plant_id = $1 AND period_start IN ({})",
            param_list(2, chunk.len())
        );
        in_tx!(tx, t => {
            let mut query = sqlx::query(&sql).bind(plant.id);
            for (start, _, _) in chunk {
                query = query.bind(*start);
            }
            query.execute(&mut **t).await.map(drop)?
        });
    }
    let rows: Vec<(Millis, i64, i64, &Figure)> = runs
        .iter()
        .flat_map(|(start, run_id, figures)| {
            figures
                .iter()
                .enumerate()
                .map(move |(seq, f)| (*start, seq as i64, *run_id, f))
        })
        .collect();
    for chunk in rows.chunks(ROWS_PER_INSERT) {
        let sql = format!(
            "INSERT INTO period_figures
                 (plant_id, period_start, seq, run_id, name, subject, uom, value, sigma)
             VALUES {}",
            value_rows(1, chunk.len(), 9)
        );
        in_tx!(tx, t => {
            let mut query = sqlx::query(&sql);
            for (start, seq, run_id, f) in chunk {
                query = query
                    .bind(plant.id)
                    .bind(*start)
                    .bind(*seq)
                    .bind(*run_id)
                    .bind(&f.name)
                    .bind(&f.subject)
                    .bind(&f.uom)
                    .bind(f.value)
                    .bind(f.sigma);
            }
            query.execute(&mut **t).await.map(drop)?
        });
    }
    Ok(())
}

impl Store {
    /// The status and global-test result of the current run of every period of `[from, to)`
    /// that has one, oldest first.
    pub async fn period_outcomes(
        &self,
        plant: &PlantRow,
        from: DateTime<Utc>,
        to: DateTime<Utc>,
    ) -> Result<Vec<PeriodOutcome>> {
        let sql = format!(
            "SELECT period_start, status, global_test_passed FROM runs AS r
             WHERE r.plant_id = $1 AND {} AND r.period_start >= $2 AND r.period_start < $3
             ORDER BY r.period_start",
            self.is_current()
        );
        on_backend!(self, s => sqlx::query(&sql)
            .bind(plant.id)
            .bind(Millis::from(from))
            .bind(Millis::from(to))
            .fetch_all(&s.pool)
            .await?
            .iter()
            .map(rows::period_outcome)
            .collect())
    }

    /// Every figure (name, subject, uom) the current runs of `[from, to)` have, in the order
    /// the reports first list them: by the first period that has the figure, then by its place
    /// in that period's list.
    ///
    /// A loose scan of the index `period_figures_by_key`: the plant's next figure after the
    /// last one found, then that figure's first period in the range, two seeks for each figure
    /// the plant has ever had, whatever the length of its history or of the range. (A GROUP
    /// BY would read every row of the range: 175,000 for a year of twenty figures.)
    pub async fn figure_keys(
        &self,
        plant: &PlantRow,
        from: DateTime<Utc>,
        to: DateTime<Utc>,
    ) -> Result<Vec<FigureKey>> {
        const FIRST: &str = "
            SELECT name, subject, uom FROM period_figures WHERE plant_id = $1
            ORDER BY name, subject, uom LIMIT 1";
        const NEXT: &str = "
            SELECT name, subject, uom FROM period_figures
            WHERE plant_id = $1 AND (name, subject, uom) > ($2, $3, $4)
            ORDER BY name, subject, uom LIMIT 1";
        const FIRST_IN_RANGE: &str = "
            SELECT period_start, seq FROM period_figures
            WHERE plant_id = $1 AND name = $2 AND subject = $3 AND uom = $4
              AND period_start >= $5 AND period_start < $6
            ORDER BY period_start LIMIT 1";
        let (from, to) = (Millis::from(from), Millis::from(to));
        let mut found: Vec<((i64, i64), FigureKey)> = Vec::new();
        let mut last: Option<FigureKey> = None;
        loop {
            let next = on_backend!(self, s => {
                let query = match &last {
                    None => sqlx::query(FIRST).bind(plant.id),
                    Some(k) => sqlx::query(NEXT)
                        .bind(plant.id)
                        .bind(&k.name)
                        .bind(&k.subject)
                        .bind(&k.uom),
                };
                query
                    .fetch_optional(&s.pool)
                    .await?
                    .as_ref()
                    .map(rows::figure_key)
                    .transpose()?
            });
            let Some(key) = next else { break };
            let first: Option<(i64, i64)> = on_backend!(self, s => sqlx::query_as(FIRST_IN_RANGE)
                .bind(plant.id)
                .bind(&key.name)
                .bind(&key.subject)
                .bind(&key.uom)
                .bind(from)
                .bind(to)
                .fetch_optional(&s.pool)
                .await?);
            if let Some(at) = first {
                found.push((at, key.clone()));
            }
            last = Some(key);
        }
        found.sort_by_key(|a| a.0);
        Ok(found.into_iter().map(|(_, key)| key).collect())
    }

    /// The figures of the current runs of `[from, to)`, oldest period first: every figure, or
    /// only `key` (read through the index `period_figures_by_key`).
    pub async fn figure_cells(
        &self,
        plant: &PlantRow,
        from: DateTime<Utc>,
        to: DateTime<Utc>,
        key: Option<&FigureKey>,
    ) -> Result<Vec<FigureCell>> {
        const ALL: &str = "
            SELECT period_start, name, subject, uom, value, sigma FROM period_figures
            WHERE plant_id = $1 AND period_start >= $2 AND period_start < $3
            ORDER BY period_start, seq";
        const ONE: &str = "
            SELECT period_start, name, subject, uom, value, sigma FROM period_figures
            WHERE plant_id = $1 AND period_start >= $2 AND period_start < $3
              AND name = $4 AND subject = $5 AND uom = $6
            ORDER BY period_start";
        on_backend!(self, s => {
            let query = sqlx::query(if key.is_some() { ONE } else { ALL })
                .bind(plant.id)
                .bind(Millis::from(from))
                .bind(Millis::from(to));
            let query = match key {
                Some(k) => query.bind(&k.name).bind(&k.subject).bind(&k.uom),
                None => query,
            };
            query
                .fetch_all(&s.pool)
                .await?
                .iter()
                .map(rows::figure_cell)
                .collect()
        })
    }
}

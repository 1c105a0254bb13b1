//! The periods a range answer covers: the plant's grid from the period containing `from` to
//! the last one starting before `to`, on the period length of the revision in effect at `to`.

use chrono::{DateTime, SecondsFormat, TimeDelta, Utc};

use super::ResultsError;
use crate::service::Service;
use crate::store::PlantRow;

/// Most periods one range answer covers.
pub const MAX_PERIODS: i64 = 10_000;

/// An instant as answers write it: RFC 3339 in UTC, whole seconds.
pub fn rfc3339(t: DateTime<Utc>) -> String {
    t.to_rfc3339_opts(SecondsFormat::Secs, true)
}

/// An RFC 3339 time given as `name`, among the supported instants, or a refusal naming it.
pub fn parse_time(name: &str, text: &str) -> Result<DateTime<Utc>, ResultsError> {
    crate::readings::instant(text).map_err(|e| {
        ResultsError::Refused(format!("{name} {} is {e}", reconcile::text::quote(text)))
    })
}

/// The periods of a range.
#[derive(Debug, Clone, PartialEq)]
pub struct PeriodRange {
    pub from: DateTime<Utc>,
    pub to: DateTime<Utc>,
    pub period_seconds: i64,
    /// Start of every period of the range, oldest first.
    pub starts: Vec<DateTime<Utc>>,
}

impl PeriodRange {
    /// The grid of `period_seconds` periods (aligned to UTC) over `from..to`; refused when
    /// `from` is not before `to` or the range holds more than [`MAX_PERIODS`].
    pub fn new(
        from: DateTime<Utc>,
        to: DateTime<Utc>,
        period_seconds: i64,
    ) -> Result<PeriodRange, ResultsError> {
        if from >= to {
            return Err(ResultsError::Refused("from must be before to".into()));
        }
        let secs = period_seconds.max(1);
        let first = reconcile::period::period_start(from, secs);
        let count = ((to - first).num_seconds() + secs - 1).div_euclid(secs);
        if count > MAX_PERIODS {
            return Err(ResultsError::TooManyPeriods { count });
        }
        let starts = (0..count)
            .map(|k| first + TimeDelta::seconds(k * secs))
            .collect();
        Ok(PeriodRange {
            from,
            to,
            period_seconds: secs,
            starts,
        })
    }

    /// The range of `plant` on the period length of its revision in effect at `to`.
    pub async fn of_plant(
        service: &Service,
        plant: &PlantRow,
        from: DateTime<Utc>,
        to: DateTime<Utc>,
    ) -> Result<PeriodRange, ResultsError> {
        if from >= to {
            return Err(ResultsError::Refused("from must be before to".into()));
        }
        let (model, _) = service.model_at(plant, to).await?;
        PeriodRange::new(from, to, model.period_seconds)
    }

    /// Start of the first period (the grid start at or before `from`).
    pub fn first(&self) -> DateTime<Utc> {
        self.starts.first().copied().unwrap_or(self.from)
    }

    /// End of the period starting at `start`, on the grid.
    pub fn end_of(&self, start: DateTime<Utc>) -> DateTime<Utc> {
        start + TimeDelta::seconds(self.period_seconds)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn t(text: &str) -> DateTime<Utc> {
        DateTime::parse_from_rfc3339(text)
            .unwrap()
            .with_timezone(&Utc)
    }

    #[test]
    fn the_grid_starts_at_the_period_holding_from_and_stops_before_to() {
        let r =
            PeriodRange::new(t("2026-03-02T05:30:00Z"), t("2026-03-02T08:00:00Z"), 3600).unwrap();
        assert_eq!(
            r.starts,
            [
                t("2026-03-02T05:00:00Z"),
                t("2026-03-02T06:00:00Z"),
                t("2026-03-02T07:00:00Z")
            ]
        );
        let r =
            PeriodRange::new(t("2026-03-02T05:00:00Z"), t("2026-03-02T07:00:01Z"), 3600).unwrap();
        assert_eq!(
            r.starts.len(),
            3,
            "a period begun before `to` is in the range"
        );
        assert_eq!(r.end_of(r.first()), t("2026-03-02T06:00:00Z"));
    }

    #[test]
    fn an_empty_or_overlong_range_is_refused() {
        let a = t("2026-03-02T05:00:00Z");
        assert!(matches!(
            PeriodRange::new(a, a, 3600),
            Err(ResultsError::Refused(_))
        ));
        let long = a + TimeDelta::seconds(3600 * (MAX_PERIODS + 1));
        assert!(matches!(
            PeriodRange::new(a, long, 3600),
            Err(ResultsError::TooManyPeriods { count }) if count == MAX_PERIODS + 1
        ));
        assert!(PeriodRange::new(a, long - TimeDelta::seconds(3600), 3600).is_ok());
    }
}

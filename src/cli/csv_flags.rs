//! How an export writes its times and numbers, as `analyze` takes it: `--time-zone`,
//! `--time-format`, `--time-unit`, `--decimal-comma`.

use super::{Usage, names_parser};
use crate::csvload::{CsvOptions, TimePattern, TimeUnit};
use clap::Args;

#[derive(Debug, Clone, Default, Args)]
pub struct CsvTimeFlags {
    /// Time zone of times written without an offset ("2026-11-23 00:00:10"), as an IANA name
    /// such as Europe/Berlin. In the hour repeated when clocks go back, times are read in the
    /// order the rows give them; a time the clocks skipped is an error.
    #[arg(long, value_name = "ZONE")]
    pub time_zone: Option<String>,
    /// How the time column is written, as a strftime-style pattern, e.g. "%d.%m.%Y %H:%M:%S"
    /// for 23.11.2026 00:00:10 or "%m/%d/%Y %I:%M:%S %p" for 11/23/2026 12:00:10 AM; %.f reads
    /// optional fractions of a second, %z an offset.
    #[arg(long, value_name = "PATTERN")]
    pub time_format: Option<String>,
    /// Unit of times written as numbers (default: seconds, except that numbers of 1e11 or more
    /// are epoch milliseconds).
    #[arg(long, value_name = "UNIT", value_parser = names_parser(["s", "ms"], time_unit))]
    pub time_unit: Option<TimeUnit>,
    /// Read decimal commas ("12,5") in a comma-separated file too (in quoted cells); in a file
    /// separated by semicolons or tabs they are read anyway.
    #[arg(long)]
    pub decimal_comma: bool,
}

fn time_unit(name: &str) -> Option<TimeUnit> {
    match name {
        "s" => Some(TimeUnit::Seconds),
        "ms" => Some(TimeUnit::Milliseconds),
        _ => None,
    }
}

impl CsvTimeFlags {
    /// Sets these flags in `csv`; a zone or pattern that cannot be used is refused naming its
    /// flag.
    pub fn apply(&self, csv: &mut CsvOptions) -> Result<(), Usage> {
        if let Some(name) = &self.time_zone {
            let zone = crate::units::time_zone(name).map_err(|e| Usage::Refused {
                flag: "--time-zone",
                source: Box::new(e),
            })?;
            csv.time_zone = Some(zone);
        }
        if let Some(pattern) = &self.time_format {
            let pattern = TimePattern::new(pattern).map_err(|e| Usage::Refused {
                flag: "--time-format",
                source: Box::new(e),
            })?;
            csv.time_pattern = Some(pattern);
        }
        if let Some(unit) = self.time_unit {
            csv.time_unit = Some(unit);
        }
        csv.decimal_comma |= self.decimal_comma;
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn flags_set_the_options_and_refusals_name_the_flag() {
        let flags = CsvTimeFlags {
            time_zone: Some("Europe/Berlin".into()),
            time_format: Some("%d.%m.%Y %H:%M:%S".into()),
            time_unit: Some(TimeUnit::Milliseconds),
            decimal_comma: true,
        };
        let mut csv = CsvOptions::default();
        flags.apply(&mut csv).unwrap();
        assert_eq!(csv.time_zone.unwrap().iana_name(), Some("Europe/Berlin"));
        assert_eq!(csv.time_pattern.unwrap().as_str(), "%d.%m.%Y %H:%M:%S");
        assert_eq!(csv.time_unit, Some(TimeUnit::Milliseconds));
        assert!(csv.decimal_comma);

        let mut csv = CsvOptions::default();
        CsvTimeFlags::default().apply(&mut csv).unwrap();
        assert_eq!(csv, CsvOptions::default());

        let zone = CsvTimeFlags {
            time_zone: Some("Mars/Olympus".into()),
            ..CsvTimeFlags::default()
        };
        let e = zone
            .apply(&mut CsvOptions::default())
            .unwrap_err()
            .to_string();
        assert!(e.starts_with("--time-zone: unknown time zone"), "{e}");
        let pattern = CsvTimeFlags {
            time_format: Some("%d.%m %H:%M".into()),
            ..CsvTimeFlags::default()
        };
        let e = pattern.apply(&mut CsvOptions::default()).unwrap_err();
        assert!(e.to_string().starts_with("--time-format: "), "{e}");
        assert_eq!(super::super::Failure::from(e).exit_code(), 2);
    }
}

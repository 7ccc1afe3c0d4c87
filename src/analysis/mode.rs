//! What "automatic" means for a loop's mode signal, defined once: the live daemon (MQTT and
//! Modbus sources) and the offline CSV loader both read a mode value through [`AutoValues`], so
//! the same mode signal gives the same episode windows on both paths.

/// The mode values that mean automatic (or cascade); any other value means not automatic.
///
/// Words compare ignoring case. Numbers: when the list holds numbers, a numeric mode is automatic
/// exactly when it equals one of them (for controllers that publish an enumeration such as
/// 0 manual, 1 auto, 2 cascade, 3 tracking); when the list holds only words, any non-zero
/// number is automatic (a 0/1 flag), as in a CSV export's mode column. Text that reads as a
/// number counts as that number; JSON `true`/`false` count as 1/0.
#[derive(Debug, Clone, PartialEq)]
pub struct AutoValues {
    /// As written, for display.
    written: Vec<String>,
    /// The non-numeric values, lower-cased.
    words: Vec<String>,
    /// The numeric values.
    numbers: Vec<f64>,
}

/// The automatic values when the config gives none: the usual words, and any non-zero number.
pub const DEFAULT_AUTO_VALUES: [&str; 4] = ["AUTO", "CAS", "ON", "TRUE"];

impl AutoValues {
    pub fn new<S: AsRef<str>>(values: &[S]) -> AutoValues {
        let mut words = Vec::new();
        let mut numbers = Vec::new();
        for v in values {
            let v = v.as_ref().trim();
            match v.parse::<f64>() {
                Ok(n) if n.is_finite() => numbers.push(n),
                _ => words.push(v.to_lowercase()),
            }
        }
        AutoValues {
            written: values.iter().map(|v| v.as_ref().to_owned()).collect(),
            words,
            numbers,
        }
    }

    /// Whether a numeric mode value means automatic.
    pub fn is_auto_number(&self, value: f64) -> bool {
        if self.numbers.is_empty() {
            value != 0.0
        } else {
            self.numbers.contains(&value)
        }
    }

    /// Whether a text mode value means automatic; text that reads as a finite number is judged
    /// as that number.
    pub fn is_auto_text(&self, text: &str) -> bool {
        let text = text.trim();
        match text.parse::<f64>() {
            Ok(n) if n.is_finite() => self.is_auto_number(n),
            _ => {
                if text.is_ascii() {
                    self.words.iter().any(|w| text.eq_ignore_ascii_case(w))
                } else {
                    self.words.contains(&text.to_lowercase())
                }
            }
        }
    }

    /// The values as written in the config.
    pub fn written(&self) -> &[String] {
        &self.written
    }

    /// The rule in words, e.g. `AUTO, CAS (any case) or any non-zero number`.
    pub fn describe(&self) -> String {
        let (words, numbers): (Vec<&String>, Vec<&String>) = self
            .written
            .iter()
            .partition(|w| !matches!(w.trim().parse::<f64>(), Ok(n) if n.is_finite()));
        let join = |v: &[&String]| v.iter().map(|s| s.as_str()).collect::<Vec<_>>().join(", ");
        match (words.is_empty(), numbers.is_empty()) {
            (false, true) => format!("{} (any case) or any non-zero number", join(&words)),
            (false, false) => format!("{} (any case) or one of {}", join(&words), join(&numbers)),
            (true, _) => format!("one of {}", join(&numbers)),
        }
    }
}

impl Default for AutoValues {
    fn default() -> Self {
        AutoValues::new(&DEFAULT_AUTO_VALUES)
    }
}

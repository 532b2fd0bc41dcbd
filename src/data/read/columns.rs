//! Column names: the canonical columns, which are required and which go in pairs, and the
//! user's map from canonical names to a file's names, choice codes and missing-value tokens.

use super::super::Choice;
use super::cells::Cell;
use std::str::FromStr;

/// Canonical column names, in the order of the column table in [`crate::data`].
pub(super) const CANONICAL: [&str; 17] = [
    "subject",
    "group",
    "run",
    "trial",
    "option_a",
    "option_b",
    "effort_a",
    "effort_b",
    "reward_a",
    "reward_b",
    "choice",
    "rt",
    "outcome",
    "onset",
    "outcome_onset",
    "outcome_if_a",
    "outcome_if_b",
];

/// Columns every file must have.
pub(super) const REQUIRED: [&str; 6] = ["subject", "trial", "effort_a", "effort_b", "choice", "rt"];

/// Optional columns that only make sense together.
pub(super) const PAIRS: [(&str, &str); 3] = [
    ("option_a", "option_b"),
    ("reward_a", "reward_b"),
    ("outcome_if_a", "outcome_if_b"),
];

/// A column mapping, choice code or missing-value token that cannot be used: what was given and
/// what was expected.
#[derive(Clone, Debug, PartialEq, Eq, thiserror::Error)]
pub enum ColumnMapError {
    /// A column mapping without `=`.
    #[error(
        "column mapping `{item}` has no `=`: expected canonical=file, e.g. subject=participant"
    )]
    MappingWithoutEquals {
        /// The mapping as given.
        item: String,
    },
    /// A canonical name that is not one of ours.
    #[error(
        "unknown column `{column}` in column mapping `{item}`; valid columns are: {}",
        CANONICAL.join(", ")
    )]
    UnknownColumn {
        /// The name given.
        column: String,
        /// The mapping as given.
        item: String,
    },
    /// A mapping without a file column name.
    #[error("column mapping `{item}` gives no file column name for `{column}`")]
    NoFileColumn {
        /// The mapping as given.
        item: String,
        /// The canonical column.
        column: String,
    },
    /// A canonical column mapped twice.
    #[error("column `{column}` is mapped more than once")]
    MappedTwice {
        /// The canonical column.
        column: String,
    },
    /// Two canonical columns read from one file column.
    #[error("columns `{first}` and `{second}` would both be read from file column `{file}`")]
    SameFileColumn {
        /// The first canonical column (in canonical order).
        first: &'static str,
        /// The second.
        second: &'static str,
        /// The file column.
        file: String,
    },
    /// A choice code without `=`.
    #[error("choice code `{item}` has no `=`: expected code=a or code=b, e.g. 1=a,2=b")]
    CodeWithoutEquals {
        /// The code as given.
        item: String,
    },
    /// A choice code that maps to something other than an option label.
    #[error("choice code `{item}` maps to `{option}`; expected an option a, b, c, …, e.g. 1=a,2=b")]
    NotAnOption {
        /// The code as given.
        item: String,
        /// What it maps to.
        option: String,
    },
    /// A choice code with nothing before `=`.
    #[error(
        "choice code `{item}` has no code before `=`; expected code=a or code=b (an empty cell \
         is always no response)"
    )]
    EmptyCode {
        /// The code as given.
        item: String,
    },
    /// A choice code given twice.
    #[error("choice code `{code}` is given more than once")]
    CodeTwice {
        /// The code.
        code: String,
    },
    /// A choice code that is also a missing-value token.
    #[error(
        "choice code `{code}` is also a missing-value token (--missing); expected it in only one \
         of them"
    )]
    CodeIsMissingToken {
        /// The code.
        code: String,
    },
    /// Choice codes without a code for option a or b.
    #[error(
        "choice codes `{spec}` give no code for option {option}; expected at least one code for \
         each of a and b, e.g. 1=a,2=b"
    )]
    NoCodeFor {
        /// The codes as given.
        spec: String,
        /// The option without a code.
        option: &'static str,
    },
    /// An empty missing-value token.
    #[error(
        "missing-value tokens `{spec}` include an empty token; expected tokens such as NA,NaN \
         separated by single commas (empty cells are always missing)"
    )]
    EmptyToken {
        /// The tokens as given.
        spec: String,
    },
    /// A missing-value token that is also a choice code.
    #[error(
        "missing-value token `{token}` is also the choice code `{code}`; expected it in only one \
         of them"
    )]
    TokenIsCode {
        /// The token.
        token: String,
        /// The choice code, as given.
        code: String,
    },
}

/// How a file's columns and codes map to ours: column names, and optionally the file's choice
/// codes and missing-value tokens.
///
/// The default maps every canonical name to itself, reads choices as `a`/`b` and only empty cells
/// as missing. [`ColumnMap::parse`] reads a comma-separated list of `canonical=file` pairs, such
/// as `subject=participant,rt=RT_sec`; names not listed keep their canonical name.
/// [`ColumnMap::with_choice_codes`] and [`ColumnMap::with_missing`] add the codes.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct ColumnMap {
    /// File column name for each entry of [`CANONICAL`], in the same order.
    file: Vec<String>,
    /// The file's choice codes and the option each stands for (empty: `a` and `b`).
    choice_codes: Vec<(String, Choice)>,
    /// Cell texts read as missing besides the empty cell.
    missing: Vec<String>,
}

impl Default for ColumnMap {
    fn default() -> Self {
        ColumnMap {
            file: CANONICAL.iter().map(|c| c.to_string()).collect(),
            choice_codes: Vec::new(),
            missing: Vec::new(),
        }
    }
}

impl ColumnMap {
    /// All canonical column names, in the order of the column table.
    pub const CANONICAL: &'static [&'static str] = &CANONICAL;

    /// Parses `canonical=file` pairs separated by commas. Unknown canonical names, a name given
    /// twice, empty names and two canonical columns read from the same file column are errors.
    pub fn parse(spec: &str) -> Result<ColumnMap, ColumnMapError> {
        let mut map = ColumnMap::default();
        let mut given = [false; CANONICAL.len()];
        for item in spec.split(',') {
            let item = item.trim();
            if item.is_empty() {
                continue;
            }
            let item_text = || item.to_string();
            let Some((canonical, file)) = item.split_once('=') else {
                return Err(ColumnMapError::MappingWithoutEquals { item: item_text() });
            };
            let (canonical, file) = (canonical.trim(), file.trim());
            let Some(index) = CANONICAL.iter().position(|c| *c == canonical) else {
                return Err(ColumnMapError::UnknownColumn {
                    column: canonical.to_string(),
                    item: item_text(),
                });
            };
            if file.is_empty() {
                return Err(ColumnMapError::NoFileColumn {
                    item: item_text(),
                    column: canonical.to_string(),
                });
            }
            if given[index] {
                return Err(ColumnMapError::MappedTwice {
                    column: canonical.to_string(),
                });
            }
            given[index] = true;
            map.file[index] = file.to_string();
        }
        let named: Vec<(&'static str, &str)> = CANONICAL
            .iter()
            .zip(&map.file)
            .map(|(c, f)| (*c, f.as_str()))
            .collect();
        for (i, (first, file)) in named.iter().enumerate() {
            if let Some((second, _)) = named[i + 1..].iter().find(|(_, f)| f == file) {
                return Err(ColumnMapError::SameFileColumn {
                    first,
                    second,
                    file: file.to_string(),
                });
            }
        }
        Ok(map)
    }

    /// The same mapping reading the choice column through `spec`, comma-separated `code=option`
    /// pairs with option `a`, `b` (or `c`, … for more options), such as `1=a,2=b` or
    /// `accept=a,reject=b` (codes compared without regard to ASCII case, after trimming). An
    /// empty `spec` keeps the side labels. Each code once; a and b must have a code; a code may
    /// not also be a missing-value token.
    pub fn with_choice_codes(mut self, spec: &str) -> Result<ColumnMap, ColumnMapError> {
        let mut codes: Vec<(String, Choice)> = Vec::new();
        for item in spec.split(',').map(str::trim).filter(|i| !i.is_empty()) {
            let item_text = || item.to_string();
            let Some((code, option)) = item.split_once('=') else {
                return Err(ColumnMapError::CodeWithoutEquals { item: item_text() });
            };
            let (code, option) = (code.trim(), option.trim());
            let Some(choice) = Choice::from_label(option) else {
                return Err(ColumnMapError::NotAnOption {
                    item: item_text(),
                    option: option.to_string(),
                });
            };
            if code.is_empty() {
                return Err(ColumnMapError::EmptyCode { item: item_text() });
            }
            if codes.iter().any(|(c, _)| c.eq_ignore_ascii_case(code)) {
                return Err(ColumnMapError::CodeTwice {
                    code: code.to_string(),
                });
            }
            if self.is_missing_token(code) {
                return Err(ColumnMapError::CodeIsMissingToken {
                    code: code.to_string(),
                });
            }
            codes.push((code.to_string(), choice));
        }
        if !codes.is_empty() {
            for (choice, option) in [(Choice::A, "a"), (Choice::B, "b")] {
                if !codes.iter().any(|(_, c)| *c == choice) {
                    return Err(ColumnMapError::NoCodeFor {
                        spec: spec.to_string(),
                        option,
                    });
                }
            }
        }
        self.choice_codes = codes;
        Ok(self)
    }

    /// The same mapping reading every cell equal to one of the comma-separated tokens of `spec`
    /// (such as `NA,NaN,N/A,.`; compared without regard to ASCII case, after trimming) as missing,
    /// like an empty cell, in every column. In Parquet files a token `NaN` also matches
    /// floating-point NaN, and a numeric token (such as `-99`) matches that number.
    pub fn with_missing(mut self, spec: &str) -> Result<ColumnMap, ColumnMapError> {
        let mut tokens: Vec<String> = Vec::new();
        for token in spec.split(',').map(str::trim) {
            if token.is_empty() {
                if spec.trim().is_empty() {
                    continue;
                }
                return Err(ColumnMapError::EmptyToken {
                    spec: spec.to_string(),
                });
            }
            if let Some((code, _)) = self
                .choice_codes
                .iter()
                .find(|(c, _)| c.eq_ignore_ascii_case(token))
            {
                return Err(ColumnMapError::TokenIsCode {
                    token: token.to_string(),
                    code: code.clone(),
                });
            }
            if !tokens.iter().any(|t| t.eq_ignore_ascii_case(token)) {
                tokens.push(token.to_string());
            }
        }
        self.missing = tokens;
        Ok(self)
    }

    /// How the file is read, in words (for messages and the journal of a resumable run): the
    /// columns read under another name as `canonical="file"`, the choice codes as
    /// `"code"=side` and the texts read as missing, each quoted, so that two readings never
    /// read alike.
    pub fn describe(&self) -> String {
        let renamed: Vec<String> = CANONICAL
            .iter()
            .zip(&self.file)
            .filter(|(canonical, file)| **canonical != file.as_str())
            .map(|(canonical, file)| format!("{canonical}={file:?}"))
            .collect();
        let codes: Vec<String> = self
            .choice_codes
            .iter()
            .map(|(code, choice)| format!("{code:?}={}", choice.as_str()))
            .collect();
        let missing: Vec<String> = self.missing.iter().map(|m| format!("{m:?}")).collect();
        let list = |items: &[String], none: &str| {
            if items.is_empty() {
                none.to_string()
            } else {
                items.join(" ")
            }
        };
        format!(
            "columns {}, choices {}, missing {}",
            list(&renamed, "by their own names"),
            list(&codes, "by their labels a and b"),
            list(&missing, "only empty cells")
        )
    }

    /// The choice codes given with [`ColumnMap::with_choice_codes`] (empty: `a` and `b`).
    pub fn choice_codes(&self) -> &[(String, Choice)] {
        &self.choice_codes
    }

    /// The missing-value tokens given with [`ColumnMap::with_missing`].
    pub fn missing_tokens(&self) -> &[String] {
        &self.missing
    }

    pub(super) fn is_missing_token(&self, text: &str) -> bool {
        self.missing.iter().any(|t| t.eq_ignore_ascii_case(text))
    }

    /// True when a cell of the file stands for a missing value.
    pub(super) fn reads_as_missing(&self, cell: Cell<'_>) -> bool {
        match cell {
            Cell::Missing => true,
            Cell::Text(s) => self.is_missing_token(s),
            Cell::Int(i) => self
                .missing
                .iter()
                .any(|t| t.parse::<f64>().is_ok_and(|x| x == i as f64)),
            Cell::Float(x) if x.is_nan() => self.is_missing_token("NaN"),
            Cell::Float(x) => self
                .missing
                .iter()
                .any(|t| t.parse::<f64>().is_ok_and(|y| y == x)),
        }
    }

    /// The file's name for canonical column `canonical` (unknown names are returned unchanged).
    pub fn file_name<'a>(&'a self, canonical: &'a str) -> &'a str {
        match CANONICAL.iter().position(|c| *c == canonical) {
            Some(index) => &self.file[index],
            None => canonical,
        }
    }
}

impl FromStr for ColumnMap {
    type Err = ColumnMapError;

    fn from_str(spec: &str) -> Result<Self, Self::Err> {
        ColumnMap::parse(spec)
    }
}

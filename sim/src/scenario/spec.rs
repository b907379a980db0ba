//! The one place where scenario keys, their defaults, units, allowed ranges and documentation
//! are declared.
//!
//! Each scenario section is declared with [`section!`]: the macro writes the serde struct
//! (unknown keys rejected, every key optional with its default), its `Default`, a list of
//! [`KeySpec`] that the `defaults` command prints, and the range checks that validation runs.

use std::fmt;

/// The set of values a numeric key accepts.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Check {
    pub lo: f64,
    pub lo_open: bool,
    pub hi: f64,
    pub hi_open: bool,
    /// Whether the value must be a whole number (counts, lattice sizes).
    pub integer: bool,
}

impl Check {
    /// Any finite number.
    pub const fn finite() -> Self {
        Check { lo: f64::NEG_INFINITY, lo_open: true, hi: f64::INFINITY, hi_open: true, integer: false }
    }
    /// A number strictly greater than zero.
    pub const fn positive() -> Self {
        Check { lo: 0.0, lo_open: true, hi: f64::INFINITY, hi_open: true, integer: false }
    }
    /// A number greater than or equal to zero.
    pub const fn non_negative() -> Self {
        Check { lo: 0.0, lo_open: false, hi: f64::INFINITY, hi_open: true, integer: false }
    }
    /// A number in the closed interval [0, 1].
    pub const fn fraction() -> Self {
        Check { lo: 0.0, lo_open: false, hi: 1.0, hi_open: false, integer: false }
    }
    /// A number in the open interval (0, 1).
    pub const fn open_fraction() -> Self {
        Check { lo: 0.0, lo_open: true, hi: 1.0, hi_open: true, integer: false }
    }
    /// A number in the closed interval [lo, hi].
    pub const fn closed(lo: f64, hi: f64) -> Self {
        Check { lo, lo_open: false, hi, hi_open: false, integer: false }
    }
    /// A number in (lo, hi].
    pub const fn above_upto(lo: f64, hi: f64) -> Self {
        Check { lo, lo_open: true, hi, hi_open: false, integer: false }
    }
    /// A whole number in [lo, hi].
    pub const fn count(lo: f64, hi: f64) -> Self {
        Check { lo, lo_open: false, hi, hi_open: false, integer: true }
    }

    /// Whether `x` is allowed.
    pub fn accepts(&self, x: f64) -> bool {
        if !x.is_finite() {
            return false;
        }
        let lo_ok = if self.lo_open { x > self.lo } else { x >= self.lo };
        let hi_ok = if self.hi_open { x < self.hi } else { x <= self.hi };
        lo_ok && hi_ok && (!self.integer || x.fract() == 0.0)
    }
}

/// A number as a person reads it: plain for everyday magnitudes, scientific otherwise.
pub fn human(x: f64) -> String {
    if x != 0.0 && (x.abs() >= 1e5 || x.abs() < 1e-3) { format!("{x:e}") } else { format!("{x}") }
}

impl fmt::Display for Check {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let what = if self.integer { "a whole number" } else { "a finite number" };
        match (self.lo.is_finite(), self.hi.is_finite()) {
            (false, false) => write!(f, "{what}"),
            (true, false) => write!(f, "{what} {} {}", if self.lo_open { ">" } else { ">=" }, human(self.lo)),
            (false, true) => write!(f, "{what} {} {}", if self.hi_open { "<" } else { "<=" }, human(self.hi)),
            (true, true) => write!(
                f,
                "{what} in {}{}, {}{}",
                if self.lo_open { "(" } else { "[" },
                human(self.lo),
                human(self.hi),
                if self.hi_open { ")" } else { "]" }
            ),
        }
    }
}

/// One documented key of a section.
#[derive(Debug, Clone)]
pub struct KeySpec {
    pub key: &'static str,
    pub doc: &'static str,
    pub check: Option<Check>,
}

/// One thing wrong with a scenario: where, what was found, what was expected.
#[derive(Debug, Clone, PartialEq)]
pub struct Problem {
    /// Dotted key path, arrays indexed: `particle[1].radius_nm`.
    pub path: String,
    /// The offending value as written (or a short description of it).
    pub value: String,
    /// What the key accepts.
    pub expected: String,
    /// 1-based line in the scenario file, when it can be located.
    pub line: Option<usize>,
}

/// A scenario value that can check itself against a [`Check`] and recurse into sub-sections.
pub trait Checked {
    fn check_into(&self, path: &str, check: Option<&Check>, out: &mut Vec<Problem>);
}

fn push_number(path: &str, x: f64, check: Option<&Check>, out: &mut Vec<Problem>) {
    if let Some(c) = check {
        if !c.accepts(x) {
            out.push(Problem { path: path.to_string(), value: format!("{x}"), expected: c.to_string(), line: None });
        }
    } else if !x.is_finite() {
        out.push(Problem {
            path: path.to_string(),
            value: format!("{x}"),
            expected: Check::finite().to_string(),
            line: None,
        });
    }
}

macro_rules! checked_number {
    ($($t:ty),*) => {$(
        impl Checked for $t {
            #[allow(clippy::cast_precision_loss, clippy::unnecessary_cast)]
            fn check_into(&self, path: &str, check: Option<&Check>, out: &mut Vec<Problem>) {
                push_number(path, *self as f64, check, out);
            }
        }
    )*};
}
checked_number!(f64, u32, u64, usize, i64);

impl<T: Checked, const N: usize> Checked for [T; N] {
    fn check_into(&self, path: &str, check: Option<&Check>, out: &mut Vec<Problem>) {
        for (i, x) in self.iter().enumerate() {
            x.check_into(&format!("{path}[{i}]"), check, out);
        }
    }
}

impl<T: Checked> Checked for Vec<T> {
    fn check_into(&self, path: &str, check: Option<&Check>, out: &mut Vec<Problem>) {
        for (i, x) in self.iter().enumerate() {
            x.check_into(&format!("{path}[{i}]"), check, out);
        }
    }
}

impl<T: Checked> Checked for Option<T> {
    fn check_into(&self, path: &str, check: Option<&Check>, out: &mut Vec<Problem>) {
        if let Some(x) = self {
            x.check_into(path, check, out);
        }
    }
}

/// Values without numeric content (strings, flags, plain enums) have nothing to range-check.
macro_rules! checked_plain {
    ($($t:ty),*) => {$(
        impl $crate::scenario::spec::Checked for $t {
            fn check_into(&self, _: &str, _: Option<&$crate::scenario::spec::Check>, _: &mut Vec<$crate::scenario::spec::Problem>) {}
        }
    )*};
}
pub(crate) use checked_plain;
checked_plain!(String, bool, std::path::PathBuf);

/// A section of the scenario: its keys with documentation, for the `defaults` command.
pub trait Section: Checked + Default + serde::Serialize {
    /// The keys of this section in declaration order.
    fn keys() -> Vec<KeySpec>;
    /// A one-line summary of the section.
    fn summary() -> &'static str;
}

/// Documentation of one section for the `defaults` command.
pub struct SectionDoc {
    /// Name as written in a file (`run`, `vessels.continuum`, `[[particle]]`).
    pub name: &'static str,
    pub summary: &'static str,
    pub keys: Vec<KeySpec>,
    /// The section's defaults.
    pub defaults: toml::Value,
}

impl SectionDoc {
    /// The documentation of section type `T` written as `name`.
    pub fn of<T: Section>(name: &'static str) -> Self {
        SectionDoc {
            name,
            summary: T::summary(),
            keys: T::keys(),
            defaults: toml::Value::try_from(T::default()).expect("section defaults serialise"),
        }
    }
}

/// Joins a path and a key.
pub fn join(path: &str, key: &str) -> String {
    if path.is_empty() { key.to_string() } else { format!("{path}.{key}") }
}

/// Declares a scenario section. Syntax, per key:
/// `/// doc` then `name: Type = default_expr, check_expr;` (the check may be omitted).
macro_rules! section {
    (
        $(#[doc = $sdoc:literal])*
        pub struct $name:ident {
            $(
                $(#[doc = $doc:literal])*
                $(#[serde($($sattr:tt)*)])*
                $field:ident : $ty:ty = $default:expr $(, $check:expr)? ;
            )*
        }
    ) => {
        $(#[doc = $sdoc])*
        #[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
        #[serde(deny_unknown_fields, default)]
        #[allow(non_snake_case)] // unit suffixes keep their usual spelling: `_mmHg`, `_per_M_s`
        pub struct $name {
            $( $(#[doc = $doc])* $(#[serde($($sattr)*)])* pub $field: $ty, )*
        }
        impl Default for $name {
            fn default() -> Self {
                Self { $( $field: $default, )* }
            }
        }
        impl $crate::scenario::spec::Checked for $name {
            fn check_into(
                &self,
                path: &str,
                _: Option<&$crate::scenario::spec::Check>,
                out: &mut Vec<$crate::scenario::spec::Problem>,
            ) {
                $(
                    {
                        let check: Option<$crate::scenario::spec::Check> = section!(@check $($check)?);
                        $crate::scenario::spec::Checked::check_into(
                            &self.$field,
                            &$crate::scenario::spec::join(path, stringify!($field)),
                            check.as_ref(),
                            out,
                        );
                    }
                )*
            }
        }
        impl $crate::scenario::spec::Section for $name {
            fn keys() -> Vec<$crate::scenario::spec::KeySpec> {
                vec![ $(
                    $crate::scenario::spec::KeySpec {
                        key: stringify!($field),
                        doc: concat!($($doc, " ",)*),
                        check: section!(@check $($check)?),
                    },
                )* ]
            }
            fn summary() -> &'static str {
                concat!($($sdoc, " ",)*)
            }
        }
    };
    (@check) => { None };
    (@check $c:expr) => { Some($c) };
}
pub(crate) use section;

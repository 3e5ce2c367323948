//! Names the store keeps as text (journal kinds, test states, onset sources, alarm codes): each is an enum
//! here or in the core, written with `ToSql` and read back with `FromSql`, which refuses a text this
//! oedolog does not know with a clear error rather than passing it on.

use rusqlite::types::{FromSql, FromSqlError, FromSqlResult, ToSql, ToSqlOutput, ValueRef};

use oedolog_core::alarms::Code;
use oedolog_core::watch::OnsetSource;

/// A stored name this oedolog does not know.
#[derive(Debug, thiserror::Error)]
#[error("the database holds {what} `{found}`, which this oedolog does not know (was it written by a newer one?)")]
pub struct UnknownName {
    /// What kind of name (`journal kind`, `test state`, …).
    pub what: &'static str,
    /// The stored text.
    pub found: String,
}

/// Reads a stored name with `from_name`, refusing one it does not know.
pub(super) fn read_name<T>(
    value: ValueRef<'_>,
    what: &'static str,
    from_name: fn(&str) -> Option<T>,
) -> FromSqlResult<T> {
    let text = value.as_str()?;
    from_name(text).ok_or_else(|| FromSqlError::other(UnknownName { what, found: text.to_string() }))
}

/// Declares an enum stored as text: its variants with their stored names, `ALL`, `name`, `from_name`,
/// `Display` and `Serialize` (both the stored name), `ToSql` and `FromSql`.
macro_rules! stored_names {
    (
        $(#[$meta:meta])*
        pub enum $name:ident as $what:literal {
            $( $(#[$vmeta:meta])* $variant:ident = $text:literal, )+
        }
    ) => {
        $(#[$meta])*
        #[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
        pub enum $name {
            $( $(#[$vmeta])* $variant, )+
        }

        impl $name {
            /// Every value, in the order declared.
            pub const ALL: &'static [$name] = &[$($name::$variant),+];

            /// The stored name (also what the API and the webhooks show).
            pub fn name(self) -> &'static str {
                match self {
                    $($name::$variant => $text,)+
                }
            }

            /// The value of a stored name.
            pub fn from_name(text: &str) -> Option<$name> {
                $name::ALL.iter().copied().find(|v| v.name() == text)
            }
        }

        impl std::fmt::Display for $name {
            fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
                f.write_str(self.name())
            }
        }

        impl serde::Serialize for $name {
            fn serialize<S: serde::Serializer>(&self, serializer: S) -> Result<S::Ok, S::Error> {
                serializer.serialize_str(self.name())
            }
        }

        impl rusqlite::types::ToSql for $name {
            fn to_sql(&self) -> rusqlite::Result<rusqlite::types::ToSqlOutput<'_>> {
                Ok(rusqlite::types::ToSqlOutput::from(self.name()))
            }
        }

        impl rusqlite::types::FromSql for $name {
            fn column_result(value: rusqlite::types::ValueRef<'_>) -> rusqlite::types::FromSqlResult<Self> {
                $crate::store::names::read_name(value, $what, $name::from_name)
            }
        }
    };
}
pub(crate) use stored_names;

/// An onset source as `increments.onset_source` stores it (`load-step`, `deformation`).
pub(super) struct StoredOnset(pub OnsetSource);

impl StoredOnset {
    fn name(&self) -> &'static str {
        match self.0 {
            OnsetSource::LoadStep => "load-step",
            OnsetSource::Deformation => "deformation",
        }
    }

    fn from_name(text: &str) -> Option<StoredOnset> {
        [OnsetSource::LoadStep, OnsetSource::Deformation].into_iter().map(StoredOnset).find(|s| s.name() == text)
    }
}

impl ToSql for StoredOnset {
    fn to_sql(&self) -> rusqlite::Result<ToSqlOutput<'_>> {
        Ok(ToSqlOutput::from(self.name()))
    }
}

impl FromSql for StoredOnset {
    fn column_result(value: ValueRef<'_>) -> FromSqlResult<Self> {
        read_name(value, "onset source", StoredOnset::from_name)
    }
}

/// An alarm code as `alarms.code` stores it (its [`Code::name`]).
pub(super) struct StoredCode(pub Code);

impl ToSql for StoredCode {
    fn to_sql(&self) -> rusqlite::Result<ToSqlOutput<'_>> {
        Ok(ToSqlOutput::from(self.0.name()))
    }
}

impl FromSql for StoredCode {
    fn column_result(value: ValueRef<'_>) -> FromSqlResult<Self> {
        read_name(value, "alarm code", |text| Code::from_name(text).map(StoredCode))
    }
}

//! What can go wrong with the store, worded for the person who has to fix it.
//!
//! Each message names the file and says what headroom was doing. The underlying SQLite or sqlx
//! message is part of the text rather than a separate `source()`, so `{}` and `{:#}` both print
//! it exactly once.

use std::path::{Path, PathBuf};

/// The result of a store operation.
pub type Result<T, E = Error> = std::result::Result<T, E>;

/// Why a store operation failed.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum Error {
    /// A query command was pointed at a file that does not exist.
    #[error(
        "there is no store at {}: check the store path in the config \
         (the daemon creates the file the first time it runs)",
        path.display()
    )]
    NotFound { path: PathBuf },

    /// The directory that should hold a new store does not exist. headroom does not create
    /// directories on its own: a mistyped path would otherwise grow a tree nobody looks at.
    #[error(
        "cannot create the store at {}: the directory {} does not exist",
        path.display(),
        dir.display()
    )]
    NoDirectory { path: PathBuf, dir: PathBuf },

    /// SQLite could not open (or create) the file.
    #[error("cannot open the store at {}: {cause}", path.display())]
    Open { path: PathBuf, cause: sqlx::Error },

    /// The schema could not be brought up to date.
    #[error(
        "cannot bring the store at {} up to this version of headroom: {cause}",
        path.display()
    )]
    Migrate {
        path: PathBuf,
        cause: sqlx::migrate::MigrateError,
    },

    /// A file opened for reading is not a headroom store of this version.
    #[error("the file at {} cannot be read as a headroom store: {detail}", path.display())]
    Schema { path: PathBuf, detail: String },

    /// Another writer held the database for longer than the busy timeout.
    #[error(
        "the store at {} stayed locked by another writer for more than 5 s while {doing}; \
         is a second headroom process using the same file?",
        path.display()
    )]
    Busy { path: PathBuf, doing: &'static str },

    /// The disk is full.
    #[error(
        "the disk holding the store at {} is full ({doing}): free some space or shorten the \
         sample retention",
        path.display()
    )]
    DiskFull { path: PathBuf, doing: &'static str },

    /// A write reached a store that can only be read (opened read-only, or file permissions).
    #[error(
        "the store at {} cannot be written ({doing}): it was opened read-only or the file or \
         its directory is not writable by this user",
        path.display()
    )]
    ReadOnly { path: PathBuf, doing: &'static str },

    /// SQLite found the file damaged.
    #[error(
        "the store at {} is damaged ({doing}): {cause}; stop headroom, keep a copy of the file \
         and restore it from a backup",
        path.display()
    )]
    Corrupt {
        path: PathBuf,
        doing: &'static str,
        cause: sqlx::Error,
    },

    /// Any other database failure.
    #[error("the store at {} failed while {doing}: {cause}", path.display())]
    Database {
        path: PathBuf,
        doing: &'static str,
        cause: sqlx::Error,
    },

    /// A stored value that this version cannot interpret (an unknown verdict, bad JSON...).
    #[error(
        "the store at {} holds a value this version of headroom cannot read ({doing}): {detail}",
        path.display()
    )]
    BadValue {
        path: PathBuf,
        doing: &'static str,
        detail: String,
    },
}

impl Error {
    /// Sorts a database error into the kinds a user can act on. SQLite's primary result code is
    /// the low byte of the extended code that sqlx reports.
    pub(crate) fn from_sqlx(path: &Path, doing: &'static str, cause: sqlx::Error) -> Error {
        let path = path.to_path_buf();
        let primary = match &cause {
            sqlx::Error::Database(e) => e
                .code()
                .and_then(|c| c.parse::<i32>().ok())
                .map(|c| c & 0xff),
            _ => None,
        };
        match primary {
            Some(SQLITE_BUSY) | Some(SQLITE_LOCKED) => Error::Busy { path, doing },
            Some(SQLITE_READONLY) => Error::ReadOnly { path, doing },
            Some(SQLITE_FULL) => Error::DiskFull { path, doing },
            Some(SQLITE_CORRUPT) | Some(SQLITE_NOTADB) => Error::Corrupt { path, doing, cause },
            _ => Error::Database { path, doing, cause },
        }
    }

    /// Whether retrying the same operation later may succeed (the database was busy or the disk
    /// was full). The writer uses this to keep a batch instead of dropping it.
    pub fn is_transient(&self) -> bool {
        matches!(self, Error::Busy { .. } | Error::DiskFull { .. })
    }
}

// SQLite primary result codes (sqlite3.h); only the ones sorted above.
const SQLITE_BUSY: i32 = 5;
const SQLITE_LOCKED: i32 = 6;
const SQLITE_READONLY: i32 = 8;
const SQLITE_CORRUPT: i32 = 11;
const SQLITE_FULL: i32 = 13;
const SQLITE_NOTADB: i32 = 26;

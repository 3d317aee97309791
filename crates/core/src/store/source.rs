//! [`Source`]: what the readers of the core read from.
//!
//! A reader takes `&impl Source`: the [`Store`](super::Store), a
//! [`Writer`](super::Writer) (which sees its own transaction's writes), or a
//! connection of one's own to the database file (a tool or a test that opens
//! the file itself). The store's own connection never leaves this crate: the
//! trait is sealed, and the one method that hands out the connection needs a
//! key only this crate can make, so no code outside can write through the
//! store's connection, not even through a generic bound (short of `unsafe`
//! code or a call that never returns):
//!
//! ```compile_fail,E0624
//! # fn f(store: &fieldcage_core::store::Store) {
//! let _ = store.conn(); // private to the core
//! # }
//! ```
//!
//! while reading through it is open to all:
//!
//! ```no_run
//! # fn f(store: &fieldcage_core::store::Store) -> fieldcage_core::Result<()> {
//! let frame = fieldcage_core::season::Frame::load(store)?;
//! # Ok(()) }
//! ```

use rusqlite::{Connection, Transaction};

/// Something the core's readers can read the data from (sealed: implemented
/// here only).
pub trait Source: sealed::Sealed {}

pub(crate) mod sealed {
    use rusqlite::Connection;

    /// The proof of being inside this crate.
    #[derive(Debug)]
    pub struct Key(());

    impl Key {
        pub(crate) const fn new() -> Key {
            Key(())
        }
    }

    /// The connection behind a [`Source`](super::Source).
    pub trait Sealed {
        /// The connection to read through.
        fn connection(&self, key: Key) -> &Connection;
    }
}

/// The connection behind `source`.
pub(crate) fn conn_of(source: &impl Source) -> &Connection {
    source.connection(sealed::Key::new())
}

impl<T: sealed::Sealed + ?Sized> sealed::Sealed for &T {
    fn connection(&self, key: sealed::Key) -> &Connection {
        (**self).connection(key)
    }
}
impl<T: Source + ?Sized> Source for &T {}

impl sealed::Sealed for Connection {
    fn connection(&self, _: sealed::Key) -> &Connection {
        self
    }
}
impl Source for Connection {}

impl sealed::Sealed for Transaction<'_> {
    fn connection(&self, _: sealed::Key) -> &Connection {
        self
    }
}
impl Source for Transaction<'_> {}

impl sealed::Sealed for super::Store {
    fn connection(&self, _: sealed::Key) -> &Connection {
        self.conn()
    }
}
impl Source for super::Store {}

impl sealed::Sealed for super::Writer<'_> {
    fn connection(&self, _: sealed::Key) -> &Connection {
        self.conn()
    }
}
impl Source for super::Writer<'_> {}

//! The one shape of every settings type: a chainable `with_*` setter and a
//! getter of the field's own name, generated from one line per field.

/// Writes the setter `with_x` (documented by the given doc comment) and the
/// getter `x` of one settings field `x`, inside an `impl` block:
///
/// - `with_x / x: plain T`: the field has type `T`; the setter takes a `T`,
///   the getter returns a copy;
/// - `with_x / x: optional T`: the field is `Option<T>` (`None` is the
///   default); the setter takes a `T`, the getter returns the `Option<T>`;
/// - `with_x / x: borrowed T`: as `optional`, for a `T` that is not
///   `Copy`; the getter returns `Option<&T>`.
macro_rules! setting {
    ($(#[$doc:meta])* $with:ident / $field:ident: plain $t:ty) => {
        $(#[$doc])*
        #[must_use]
        pub fn $with(mut self, value: $t) -> Self {
            self.$field = value;
            self
        }

        #[doc = concat!("The `", stringify!($field), "` setting (see [`Self::", stringify!($with), "`]).")]
        pub fn $field(&self) -> $t {
            self.$field
        }
    };
    ($(#[$doc:meta])* $with:ident / $field:ident: optional $t:ty) => {
        $(#[$doc])*
        #[must_use]
        pub fn $with(mut self, value: $t) -> Self {
            self.$field = Some(value);
            self
        }

        #[doc = concat!("The `", stringify!($field), "` setting (see [`Self::", stringify!($with), "`]).")]
        pub fn $field(&self) -> Option<$t> {
            self.$field
        }
    };
    ($(#[$doc:meta])* $with:ident / $field:ident: borrowed $t:ty) => {
        $(#[$doc])*
        #[must_use]
        pub fn $with(mut self, value: $t) -> Self {
            self.$field = Some(value);
            self
        }

        #[doc = concat!("The `", stringify!($field), "` setting (see [`Self::", stringify!($with), "`]).")]
        pub fn $field(&self) -> Option<&$t> {
            self.$field.as_ref()
        }
    };
}

pub(crate) use setting;

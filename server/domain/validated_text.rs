//! What each validated text type (a metric key, a username) has besides its own parsing
//! constructor, written once: reading it back from storage, its text, comparison with plain
//! text, display, and deserialising through the parser.

/// Gives `$t`, a newtype over a `String` with a `parse(&str) -> Result<$t, _>` constructor,
/// the rest of what a validated text type has.
macro_rules! validated_text {
    ($t:ident) => {
        impl $t {
            /// A value read back from the database, which held only parsed values.
            pub fn from_stored(text: String) -> $t {
                $t(text)
            }

            pub fn as_str(&self) -> &str {
                &self.0
            }
        }

        impl PartialEq<str> for $t {
            fn eq(&self, other: &str) -> bool {
                self.0 == other
            }
        }

        impl PartialEq<&str> for $t {
            fn eq(&self, other: &&str) -> bool {
                self.0 == *other
            }
        }

        impl AsRef<str> for $t {
            fn as_ref(&self) -> &str {
                &self.0
            }
        }

        impl ::std::fmt::Display for $t {
            fn fmt(&self, f: &mut ::std::fmt::Formatter<'_>) -> ::std::fmt::Result {
                f.write_str(&self.0)
            }
        }

        impl<'de> ::serde::Deserialize<'de> for $t {
            fn deserialize<D: ::serde::Deserializer<'de>>(
                deserializer: D,
            ) -> Result<Self, D::Error> {
                let text = <String as ::serde::Deserialize>::deserialize(deserializer)?;
                $t::parse(&text).map_err(::serde::de::Error::custom)
            }
        }
    };
}

pub(super) use validated_text;

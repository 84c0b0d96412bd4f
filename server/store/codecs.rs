//! Domain values through the `Any` driver, as text: timestamps as their fixed-width form
//! (see domain::time), usernames and metric keys as themselves, and a proposal's state and a
//! review's verdict read back by their names.

use sqlx::Database;
use sqlx::any::{Any, AnyTypeInfo};
use sqlx::decode::Decode;
use sqlx::encode::{Encode, IsNull};
use sqlx::error::BoxDynError;
use sqlx::types::Type;

use crate::domain::proposal::{ProposalState, Verdict};
use crate::domain::{MetricKey, Timestamp, Username};

/// A type stored as text.
macro_rules! text_type {
    ($t:ty) => {
        impl Type<Any> for $t {
            fn type_info() -> AnyTypeInfo {
                <String as Type<Any>>::type_info()
            }

            fn compatible(ty: &AnyTypeInfo) -> bool {
                <String as Type<Any>>::compatible(ty)
            }
        }
    };
}

text_type!(Timestamp);

impl Encode<'_, Any> for Timestamp {
    fn encode_by_ref(
        &self,
        buf: &mut <Any as Database>::ArgumentBuffer,
    ) -> Result<IsNull, BoxDynError> {
        <String as Encode<Any>>::encode(self.to_string(), buf)
    }
}

impl<'r> Decode<'r, Any> for Timestamp {
    fn decode(value: <Any as Database>::ValueRef<'r>) -> Result<Self, BoxDynError> {
        let text = <String as Decode<Any>>::decode(value)?;
        Ok(Timestamp::parse(&text)?)
    }
}

/// Text types the store wrote after parsing them, read back without parsing again.
macro_rules! stored_text {
    ($t:ty) => {
        text_type!($t);

        impl Encode<'_, Any> for $t {
            fn encode_by_ref(
                &self,
                buf: &mut <Any as Database>::ArgumentBuffer,
            ) -> Result<IsNull, BoxDynError> {
                <String as Encode<Any>>::encode(self.as_str().to_string(), buf)
            }
        }

        impl<'r> Decode<'r, Any> for $t {
            fn decode(value: <Any as Database>::ValueRef<'r>) -> Result<Self, BoxDynError> {
                Ok(<$t>::from_stored(<String as Decode<Any>>::decode(value)?))
            }
        }
    };
}

stored_text!(Username);
stored_text!(MetricKey);

/// Names from a closed set, read back by their parser (stored rows were valid; an unknown name
/// is a decoding error naming `$what`).
macro_rules! stored_name {
    ($t:ty, $what:literal) => {
        text_type!($t);

        impl<'r> Decode<'r, Any> for $t {
            fn decode(value: <Any as Database>::ValueRef<'r>) -> Result<Self, BoxDynError> {
                let text = <String as Decode<Any>>::decode(value)?;
                <$t>::parse(&text)
                    .ok_or_else(|| format!(concat!("stored ", $what, " {:?}"), text).into())
            }
        }
    };
}

stored_name!(ProposalState, "state");
stored_name!(Verdict, "verdict");

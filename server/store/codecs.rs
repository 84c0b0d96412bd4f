//! Domain values through the `Any` driver, as text: timestamps as their fixed-width form
//! (see domain::time), usernames and metric keys as themselves.

use sqlx::Database;
use sqlx::any::{Any, AnyTypeInfo};
use sqlx::decode::Decode;
use sqlx::encode::{Encode, IsNull};
use sqlx::error::BoxDynError;
use sqlx::types::Type;

use crate::domain::{MetricKey, Timestamp, Username};

impl Type<Any> for Timestamp {
    fn type_info() -> AnyTypeInfo {
        <String as Type<Any>>::type_info()
    }

    fn compatible(ty: &AnyTypeInfo) -> bool {
        <String as Type<Any>>::compatible(ty)
    }
}

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
        impl Type<Any> for $t {
            fn type_info() -> AnyTypeInfo {
                <String as Type<Any>>::type_info()
            }

            fn compatible(ty: &AnyTypeInfo) -> bool {
                <String as Type<Any>>::compatible(ty)
            }
        }

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

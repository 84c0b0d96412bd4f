//! Timestamps travel through the `Any` driver as their fixed-width text (see domain::time).

use sqlx::Database;
use sqlx::any::{Any, AnyTypeInfo};
use sqlx::decode::Decode;
use sqlx::encode::{Encode, IsNull};
use sqlx::error::BoxDynError;
use sqlx::types::Type;

use crate::domain::Timestamp;

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

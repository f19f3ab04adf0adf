//! The few Spark Connect messages upshot sends and reads, declared by hand with the field
//! numbers of Spark's `spark/connect/*.proto` (Spark 4.0). Decoding skips every field not
//! declared here, so a server's newer fields do no harm; the messages we send use only fields
//! every Spark Connect server (3.4 and later) reads.

/// `spark.connect.UserContext`.
#[derive(Clone, PartialEq, prost::Message)]
pub struct UserContext {
    /// Field 1.
    #[prost(string, tag = "1")]
    pub user_id: String,
    /// Field 2.
    #[prost(string, tag = "2")]
    pub user_name: String,
}

/// `spark.connect.SQL`: a relation given as SQL text with positional arguments.
#[derive(Clone, PartialEq, prost::Message)]
pub struct Sql {
    /// Field 1: the SQL text (upshot's own, rendered from an AST).
    #[prost(string, tag = "1")]
    pub query: String,
    /// Field 5: values for the `?` markers, in order.
    #[prost(message, repeated, tag = "5")]
    pub pos_arguments: Vec<Expression>,
}

/// `spark.connect.Relation`, with only its `sql` case.
#[derive(Clone, PartialEq, prost::Message)]
pub struct Relation {
    /// Field 10.
    #[prost(message, optional, tag = "10")]
    pub sql: Option<Sql>,
}

/// `spark.connect.Plan`, with only its `root` case.
#[derive(Clone, PartialEq, prost::Message)]
pub struct Plan {
    /// Field 1.
    #[prost(message, optional, tag = "1")]
    pub root: Option<Relation>,
}

/// `spark.connect.Expression`, with only its `literal` case.
#[derive(Clone, PartialEq, prost::Message)]
pub struct Expression {
    /// Field 1.
    #[prost(message, optional, tag = "1")]
    pub literal: Option<Literal>,
}

/// `spark.connect.Expression.Literal`: NULL (of a type), a double or a string.
#[derive(Clone, PartialEq, prost::Message)]
pub struct Literal {
    /// The value.
    #[prost(oneof = "LiteralValue", tags = "1, 11, 13")]
    pub value: Option<LiteralValue>,
}

/// The cases of `Literal` upshot sends.
#[derive(Clone, PartialEq, prost::Oneof)]
pub enum LiteralValue {
    /// Field 1: NULL of the given type.
    #[prost(message, tag = "1")]
    Null(DataType),
    /// Field 11.
    #[prost(double, tag = "11")]
    Double(f64),
    /// Field 13.
    #[prost(string, tag = "13")]
    String(String),
}

/// `spark.connect.DataType`, with the two kinds upshot's NULLs take.
#[derive(Clone, PartialEq, prost::Message)]
pub struct DataType {
    /// The kind.
    #[prost(oneof = "Kind", tags = "9, 11")]
    pub kind: Option<Kind>,
}

/// `DataType`'s cases upshot uses.
#[derive(Clone, PartialEq, prost::Oneof)]
pub enum Kind {
    /// Field 9: `DataType.Double`.
    #[prost(message, tag = "9")]
    Double(Empty),
    /// Field 11: `DataType.String`.
    #[prost(message, tag = "11")]
    String(Empty),
}

/// A message with no fields we set (`DataType.Double`, `DataType.String`).
#[derive(Clone, PartialEq, prost::Message)]
pub struct Empty {}

/// `spark.connect.ExecutePlanRequest`.
#[derive(Clone, PartialEq, prost::Message)]
pub struct ExecutePlanRequest {
    /// Field 1: the client's session (a UUID).
    #[prost(string, tag = "1")]
    pub session_id: String,
    /// Field 2.
    #[prost(message, optional, tag = "2")]
    pub user_context: Option<UserContext>,
    /// Field 3.
    #[prost(message, optional, tag = "3")]
    pub plan: Option<Plan>,
    /// Field 4.
    #[prost(string, optional, tag = "4")]
    pub client_type: Option<String>,
    /// Field 6: the operation's id (a UUID), so that it can be interrupted.
    #[prost(string, optional, tag = "6")]
    pub operation_id: Option<String>,
}

/// `spark.connect.InterruptRequest`, interrupting one operation by its id.
#[derive(Clone, PartialEq, prost::Message)]
pub struct InterruptRequest {
    /// Field 1.
    #[prost(string, tag = "1")]
    pub session_id: String,
    /// Field 2.
    #[prost(message, optional, tag = "2")]
    pub user_context: Option<UserContext>,
    /// Field 3.
    #[prost(string, optional, tag = "3")]
    pub client_type: Option<String>,
    /// Field 4: `INTERRUPT_TYPE_OPERATION_ID` = 3.
    #[prost(int32, tag = "4")]
    pub interrupt_type: i32,
    /// Field 6.
    #[prost(string, optional, tag = "6")]
    pub operation_id: Option<String>,
}

/// `InterruptRequest.InterruptType.INTERRUPT_TYPE_OPERATION_ID`.
pub const INTERRUPT_OPERATION_ID: i32 = 3;

/// `spark.connect.InterruptResponse` (its fields are not read).
#[derive(Clone, PartialEq, prost::Message)]
pub struct InterruptResponse {}

/// `spark.connect.ExecutePlanResponse`, with the fields upshot reads.
#[derive(Clone, PartialEq, prost::Message)]
pub struct ExecutePlanResponse {
    /// Field 2: a batch of result rows.
    #[prost(message, optional, tag = "2")]
    pub arrow_batch: Option<ArrowBatch>,
}

/// `spark.connect.ExecutePlanResponse.ArrowBatch`.
#[derive(Clone, PartialEq, prost::Message)]
pub struct ArrowBatch {
    /// Field 1.
    #[prost(int64, tag = "1")]
    pub row_count: i64,
    /// Field 2: an Arrow IPC stream (schema, then record batches).
    #[prost(bytes = "vec", tag = "2")]
    pub data: Vec<u8>,
}

/// `spark.connect.ReleaseSessionRequest`.
#[derive(Clone, PartialEq, prost::Message)]
pub struct ReleaseSessionRequest {
    /// Field 1.
    #[prost(string, tag = "1")]
    pub session_id: String,
    /// Field 2.
    #[prost(message, optional, tag = "2")]
    pub user_context: Option<UserContext>,
    /// Field 3.
    #[prost(string, optional, tag = "3")]
    pub client_type: Option<String>,
}

/// `spark.connect.ReleaseSessionResponse` (its fields are not read).
#[derive(Clone, PartialEq, prost::Message)]
pub struct ReleaseSessionResponse {}

#[cfg(test)]
mod tests {
    use super::*;
    use prost::Message;

    /// Bytes written by hand from the protocol's wire format (field number << 3 | wire type),
    /// not by this module: a change of a tag above shows here.
    #[test]
    fn wire_bytes_match_the_protocol_field_numbers() {
        let r = ExecutePlanRequest {
            session_id: "s".into(),
            user_context: Some(UserContext {
                user_id: "u".into(),
                user_name: String::new(),
            }),
            plan: Some(Plan {
                root: Some(Relation {
                    sql: Some(Sql {
                        query: "q".into(),
                        pos_arguments: vec![Expression {
                            literal: Some(Literal {
                                value: Some(LiteralValue::String("v".into())),
                            }),
                        }],
                    }),
                }),
            }),
            client_type: None,
            operation_id: None,
        };
        let want: Vec<u8> = vec![
            0x0a, 1, b's', // 1: session_id
            0x12, 3, 0x0a, 1, b'u', // 2: user_context { 1: user_id }
            0x1a, 14, // 3: plan
            0x0a, 12, // Plan 1: root
            0x52, 10, // Relation 10: sql
            0x0a, 1, b'q', // SQL 1: query
            0x2a, 5, // SQL 5: pos_arguments
            0x0a, 3, // Expression 1: literal
            0x6a, 1, b'v', // Literal 13: string
        ];
        assert_eq!(r.encode_to_vec(), want);
        // A response with an unknown field (15: server_side_session_id) and a batch.
        let bytes = [0x7a, 1, b'x', 0x12, 4, 0x08, 2, 0x12, 0];
        let resp = ExecutePlanResponse::decode(&bytes[..]).unwrap();
        assert_eq!(resp.arrow_batch.unwrap().row_count, 2);
    }
}

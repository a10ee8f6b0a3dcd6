//! The query parameters of the records routes as the OpenAPI document states them: the same
//! value sets and forms `records::parse_query` and the handlers accept, so a client (or a
//! schema-driven test) built from the document sends only what the service takes.

use utoipa::openapi::schema::{AnyOfBuilder, ObjectBuilder, Schema, SchemaFormat, Type};
use utoipa::openapi::{KnownFormat, RefOr};
use utoipa::{PartialSchema, ToSchema};

/// A time parameter: a date (`2026-12-01`) or an RFC 3339 UTC time ending in `Z`.
pub struct TimeParam;

impl PartialSchema for TimeParam {
    fn schema() -> RefOr<Schema> {
        let date = ObjectBuilder::new()
            .schema_type(Type::String)
            .format(Some(SchemaFormat::KnownFormat(KnownFormat::Date)))
            .min_length(Some(10))
            .max_length(Some(10));
        let time = ObjectBuilder::new()
            .schema_type(Type::String)
            .format(Some(SchemaFormat::KnownFormat(KnownFormat::DateTime)))
            .pattern(Some("[Zz]$"));
        AnyOfBuilder::new()
            .item(date)
            .item(time)
            .description(Some("a date, or an RFC 3339 UTC time ending in Z"))
            .into()
    }
}

impl ToSchema for TimeParam {}

/// A page cursor: the `next_cursor` of an earlier page (hex).
pub struct CursorParam;

impl PartialSchema for CursorParam {
    fn schema() -> RefOr<Schema> {
        ObjectBuilder::new()
            .schema_type(Type::String)
            .pattern(Some("^([0-9a-f]{2})+$"))
            .max_length(Some(256))
            .into()
    }
}

impl ToSchema for CursorParam {}

/// The outcomes a search may filter on.
#[derive(serde::Serialize, ToSchema)]
#[serde(rename_all = "snake_case")]
#[allow(dead_code)]
pub enum OutcomeParam {
    Approve,
    Refer,
    Decline,
}

/// The final-action filter: referrals still pending, any recorded, or one action.
#[derive(serde::Serialize, ToSchema)]
#[serde(rename_all = "snake_case")]
#[allow(dead_code)]
pub enum FinalActionParam {
    Pending,
    Recorded,
    Approve,
    Decline,
    Withdrawn,
}

/// An export's format.
#[derive(serde::Serialize, ToSchema)]
#[serde(rename_all = "snake_case")]
#[allow(dead_code)]
pub enum ExportFormat {
    Jsonl,
    Csv,
}

/// A report's format.
#[derive(serde::Serialize, ToSchema)]
#[serde(rename_all = "snake_case")]
#[allow(dead_code)]
pub enum ReportFormat {
    Json,
    Html,
}

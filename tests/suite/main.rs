//! The whole test suite, in one binary to keep build times down. Tests that need a database
//! run on SQLite and on PostgreSQL: the server `CUTPOINTS_TEST_POSTGRES_URL` names, or a
//! throwaway cluster the run starts itself (DEVELOPERS.md, "Testing").

mod helpers;
mod layers;

mod accounts;
mod audit_chain;
mod audit_checkpoint;
mod audit_replay;
mod audit_storage;
mod audit_views;
mod bad_input;
mod body_messages;
mod browser;
mod cli;
mod control_characters;
mod csv_injection;
mod demo_data;
mod diffs;
mod engine_properties;
mod engine_rules;
mod evidence;
mod faults;
mod history_chart;
mod open_redirect;
mod openapi;
mod outages;
mod page_templates;
mod pages;
mod pg_cluster;
mod platform;
mod published;
mod published_reads;
mod published_schema;
mod record_lookups;
mod register_api;
mod serve;
mod signoff_order;
mod workflow_api;
mod workflow_pages;
mod workflow_races;
mod workflow_rules;
mod workflow_support;
mod zone_strip;

//! beamproof's integration tests, one binary with modules by theme.

mod archive;
mod campaign_errors;
mod compare;
mod demo_data;
mod dynamic_plugins;
mod evidence;
mod film;
mod film_scan_reader;
mod gamma_cmd;
mod gamma_crosscheck;
mod mu_check;
mod newcomer;
mod report_content;
mod report_templates;
mod rtdose_reader;
mod rtplan_reader;
mod runs;
mod schema;
mod signing;
mod support;

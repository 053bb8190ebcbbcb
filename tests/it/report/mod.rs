//! Analysis, comparison, drift, the report outputs and the report and history commands.

mod cli;
mod drift;
mod html;
mod outputs;
mod plots_line;
mod robust;
mod sim;
mod verdicts;

//! Integration tests: the daemon against a real mosquitto started on a free loopback
//! port (no mocked broker), the demo, replay, and the core monitor on the demo plant's
//! configuration. One test binary; modules by subject.

mod support;

mod alarms;
mod daemon;
mod demo;
mod disk;
mod fleet;
mod link;
mod monitor;
mod page;
mod replay;
mod report;
mod service;
mod session;
mod site;
mod slow_link;
mod sparkplug;
mod tls;

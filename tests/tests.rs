//! Integration tests of the daemon against a real mosquitto started on a free loopback
//! port (no mocked broker). One test binary; modules by subject.

mod support;

mod alarms;
mod daemon;
mod demo;
mod replay;

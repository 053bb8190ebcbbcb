//! The bench as the runner sees it: [`crate::control::BenchControl`] for [`Bench`]. Every
//! setting marks the moment on the streaming instruments; bench errors become control errors
//! that keep the bench error whole.

use super::{Bench, BenchError};
use crate::control::{BenchControl, ControlError, InstrumentIdentity};
use crate::measure::{LoadMode, Measurement, Role};

/// Turn a bench error into the runner's error type, keeping it whole (its message names the
/// instrument once).
pub fn control_error(e: BenchError) -> ControlError {
    e.into_control()
}

impl BenchControl for Bench {
    fn has_role(&self, role: Role) -> bool {
        self.instruments()
            .iter()
            .any(|i| i.cfg.roles.contains(&role))
    }

    fn identities(&self) -> Vec<InstrumentIdentity> {
        self.instruments()
            .iter()
            .map(|i| InstrumentIdentity {
                name: i.cfg.name.clone(),
                roles: i.cfg.roles.clone(),
                link: i.cfg.link_description(),
                identity: i.identity(),
            })
            .collect()
    }

    async fn set_load(&mut self, mode: LoadMode, value: f64) -> Result<(), ControlError> {
        let r = self.set_load_inner(mode, value).await;
        self.settings_changed();
        r.map_err(control_error)
    }

    async fn set_load_input(&mut self, on: bool) -> Result<(), ControlError> {
        let r = self.switch(Role::Load, on).await;
        self.settings_changed();
        r.map_err(control_error)
    }

    async fn set_source_voltage(&mut self, volts: f64) -> Result<(), ControlError> {
        let r = self.set_source_inner(volts).await;
        self.settings_changed();
        r.map_err(control_error)
    }

    async fn set_source_output(&mut self, on: bool) -> Result<(), ControlError> {
        let r = self.switch(Role::InputSource, on).await;
        self.settings_changed();
        r.map_err(control_error)
    }

    async fn measure(&mut self) -> Result<Measurement, ControlError> {
        self.read_all().await.map_err(control_error)
    }

    async fn limits(&mut self, arm: bool) -> Result<(), ControlError> {
        let r = Bench::limits(self, arm).await;
        self.settings_changed();
        r.map_err(control_error)
    }

    fn guard(&mut self, record: &std::path::Path) -> Result<(), ControlError> {
        Bench::guard(self, record).map_err(|e| ControlError::new("guardian", e.to_string()))
    }

    fn stand_down(&mut self) {
        Bench::stand_down(self)
    }

    fn take_retries(&mut self) -> u32 {
        Bench::take_retries(self)
    }

    async fn safe_state(&mut self) -> Vec<ControlError> {
        self.run_safe_state()
            .await
            .into_iter()
            .map(control_error)
            .collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The runner may move a bench and its futures between threads (tokio::spawn).
    #[allow(dead_code)]
    fn bench_and_its_futures_are_send(b: &mut Bench) {
        fn is_send<T: Send>(_: &T) {}
        fn is_sync<T: Sync>() {}
        is_sync::<Bench>();
        is_send(&b.measure());
        is_send(&b.set_load(LoadMode::ConstantCurrent, 0.1));
        is_send(&b.safe_state());
    }

    #[test]
    fn control_errors_do_not_repeat_the_instrument() {
        let e = control_error(BenchError::NoReply {
            instrument: "dmm".into(),
            command: "MEAS:VOLT?".into(),
            ms: 500,
        });
        assert_eq!(e.instrument, "dmm");
        assert!(
            e.detail()
                .starts_with("no reply to 'MEAS:VOLT?' within 500 ms"),
            "{}",
            e.detail()
        );
        assert_eq!(e.to_string().matches("'dmm'").count(), 1);
    }

    // Regression: a control error keeps the bench error whole (its kind), instead of a copy of
    // its text with the instrument name cut off.
    #[test]
    fn control_errors_keep_the_bench_error() {
        let original = BenchError::Closed {
            instrument: "eload".into(),
            command: "INP OFF".into(),
        };
        let e: ControlError = original.clone().into();
        assert_eq!(e.to_string(), original.to_string());
        let kept = e.fault().and_then(|f| f.downcast_ref::<BenchError>());
        assert_eq!(kept, Some(&original));
        // An error about no single instrument is the bench's.
        let e = control_error(BenchError::NoRole { role: Role::Load });
        assert_eq!(e.instrument, "bench");
        assert_eq!(
            e.to_string(),
            "instrument 'bench': no instrument on this bench holds role 'load'; add it to a [[instrument]] roles list"
        );
        // Plain-text errors (a bench without a typed error) carry no fault.
        let e = ControlError::new("psu", "output stuck");
        assert_eq!(e.to_string(), "instrument 'psu': output stuck");
        assert!(e.fault().is_none());
    }

    #[test]
    fn configuration_problems_are_told_from_instrument_failures() {
        let located = crate::config::at_span("b.toml", "x", Some(0..0), "bad");
        assert!(BenchError::Config(located).is_config());
        assert!(BenchError::NoInstrument {
            name: "x".into(),
            known: "dmm".into()
        }
        .is_config());
        assert!(!BenchError::NoReply {
            instrument: "dmm".into(),
            command: "*IDN?".into(),
            ms: 10
        }
        .is_config());
    }
}

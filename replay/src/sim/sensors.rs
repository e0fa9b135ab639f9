//! The sensor chain: truth to recorded frame, with noise, lag, latency,
//! drift, dropouts and scheduled faults.
//!
//! - Probe: truth port pressures ([`super::probe_truth`]) from the flow
//!   *relative to the moving head*, seen through the misaligned probe;
//!   pneumatic faults at the port (leak toward static, blocked: holds the
//!   line pressure it had at onset); first-order line lag; a latency of
//!   whole time steps; per-port bias and white noise; transducer faults at
//!   the output (stuck: frozen at the last reading).
//! - Contacts: each skin sensor point outside the union of conduit tubes is
//!   pressed into the wall; force = stiffness x penetration (plus noise),
//!   reported above a threshold, with the wall's outward normal in the
//!   module frame; dead sensors report nothing.
//! - Odometry: dead reckoning whose attitude error is a random walk in
//!   distance travelled and whose position error grows with a random walk,
//!   the attitude error acting on every step, a scale error, and scheduled
//!   drift.
//! - Joints: encoder noise. Temperature: total temperature plus noise.

use nalgebra::{Rotation3, UnitQuaternion, Vector3};

use super::body::Body;
use super::probe_truth;
use super::rng::{NormalRng, stream};
use super::scenario::{Channel, FaultKind, Scenario};
use super::vec3::{self, V3};
use super::world::{FlowSample, World};
use crate::record::{ContactRecord, FrameRecord, JointRecord, PoseRecord};

/// Sensor state carried from frame to frame.
#[derive(Debug, Clone)]
pub struct Sensors {
    normals_head: Vec<V3>,
    nports: usize,
    lag_alpha: f64,
    lag: Vec<f64>,
    lag_ready: bool,
    delay_steps: usize,
    delay: Vec<f64>,
    delay_head: usize,
    delay_filled: usize,
    blocked_hold: Vec<Option<f64>>,
    stuck_hold: Vec<Option<f64>>,
    last_out: Vec<f64>,
    truth_ports: Vec<f64>,
    rng_probe: NormalRng,
    rng_contact: NormalRng,
    rng_odo: NormalRng,
    rng_joint: NormalRng,
    rng_temp: NormalRng,
    rng_drop: NormalRng,
    /// The stamp a stuck frame clock holds.
    clock_hold: Option<f64>,
    odo_pos_err: V3,
    odo_att_err: V3,
    travelled_m: f64,
    joint_buf: Vec<JointRecord>,
    port_buf: Vec<f64>,
    skin: SkinState,
}

/// The skin's true state in the last frame produced (for scoring: what
/// the sensors would feel if none were dead and nothing dropped out).
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct SkinState {
    /// Sensors pressed into a wall with a force at or above the threshold.
    pub touching: u32,
    /// Deepest penetration of any sensor point into a wall, m.
    pub max_penetration_m: f64,
}

impl Sensors {
    /// The skin's true state in the last frame produced.
    #[must_use]
    pub fn skin(&self) -> SkinState {
        self.skin
    }

    /// Fresh sensors for a scenario.
    #[must_use]
    pub fn new(sc: &Scenario) -> Self {
        let normals = probe_truth::port_normals(&sc.robot.probe.layout);
        let [yaw, pitch, roll] = sc.sensors.probe.misalignment_deg;
        let mis = Rotation3::from_axis_angle(&Vector3::z_axis(), yaw.to_radians())
            * Rotation3::from_axis_angle(&Vector3::y_axis(), pitch.to_radians())
            * Rotation3::from_axis_angle(&Vector3::x_axis(), roll.to_radians());
        let normals_head: Vec<V3> = normals
            .iter()
            .map(|n| {
                let v = mis * Vector3::new(n[0], n[1], n[2]);
                [v.x, v.y, v.z]
            })
            .collect();
        let nports = normals_head.len();
        let dt = sc.time_step_s;
        let tau = sc.sensors.probe.time_constant_s;
        let lag_alpha = if tau > 0.0 {
            1.0 - libm::exp(-dt / tau)
        } else {
            1.0
        };
        let delay_steps = libm::round(sc.sensors.probe.latency_s / dt) as usize;
        let seed = sc.seed;
        Self {
            normals_head,
            nports,
            lag_alpha,
            lag: vec![0.0; nports],
            lag_ready: false,
            delay_steps,
            delay: vec![0.0; nports * (delay_steps + 1)],
            delay_head: 0,
            delay_filled: 0,
            blocked_hold: vec![None; nports],
            stuck_hold: vec![None; nports],
            last_out: vec![0.0; nports],
            truth_ports: vec![0.0; nports],
            rng_probe: NormalRng::new(seed, stream::PROBE),
            rng_contact: NormalRng::new(seed, stream::CONTACT),
            rng_odo: NormalRng::new(seed, stream::ODOMETRY),
            rng_joint: NormalRng::new(seed, stream::JOINTS),
            rng_temp: NormalRng::new(seed, stream::TEMPERATURE),
            rng_drop: NormalRng::new(seed, stream::DROPOUT),
            clock_hold: None,
            odo_pos_err: [0.0; 3],
            odo_att_err: [0.0; 3],
            travelled_m: 0.0,
            joint_buf: Vec::new(),
            port_buf: Vec::new(),
            skin: SkinState::default(),
        }
    }

    /// The truth port pressures of the last frame (before lag, latency,
    /// bias, noise and faults), Pa.
    #[must_use]
    pub fn truth_ports(&self) -> &[f64] {
        &self.truth_ports
    }

    /// Current odometry position error, map frame, m.
    #[must_use]
    pub fn odometry_error_m(&self) -> V3 {
        self.odo_pos_err
    }

    /// Update dead reckoning for a true head displacement `disp` over `dt`.
    pub fn integrate_odometry(&mut self, sc: &Scenario, t: f64, dt: f64, disp: V3) {
        let o = &sc.sensors.odometry;
        let ds = vec3::norm(disp);
        self.travelled_m += ds;
        if ds > 0.0 {
            let k = libm::sqrt(ds);
            for e in &mut self.odo_att_err {
                *e += self.rng_odo.gauss(o.attitude_walk_rad_per_sqrt_m * k);
            }
            let rot = vec3::cross(self.odo_att_err, disp);
            for i in 0..3 {
                self.odo_pos_err[i] += o.scale_error * disp[i]
                    + rot[i]
                    + self.rng_odo.gauss(o.position_walk_m_per_sqrt_m * k);
            }
        }
        for f in &sc.faults {
            if let FaultKind::OdometryDrift { drift_m_per_s } = f.kind
                && f.active(t)
            {
                self.odo_pos_err = vec3::axpy(self.odo_pos_err, dt, drift_m_per_s);
            }
        }
    }

    /// The frame clock's stamp for true time `t`, under the clock faults
    /// active at `t` (applied in schedule order).
    fn stamp(&mut self, sc: &Scenario, t: f64) -> f64 {
        let mut s = t;
        let mut stuck = false;
        for f in sc.faults.iter().filter(|f| f.active(t)) {
            match f.kind {
                FaultKind::ClockJump { jump_s } => s += jump_s,
                FaultKind::ClockReset => s -= f.at_s,
                FaultKind::ClockNan => s = f64::NAN,
                FaultKind::ClockStuck => stuck = true,
                _ => {}
            }
        }
        if stuck {
            *self.clock_hold.get_or_insert(s)
        } else {
            self.clock_hold = None;
            s
        }
    }

    fn dropped(&mut self, sc: &Scenario, t: f64, ch: Channel, p: f64) -> bool {
        let scheduled = sc.faults.iter().any(|f| {
            f.active(t) && matches!(f.kind, FaultKind::Dropout { channel } if channel == ch || channel == Channel::All)
        });
        // Always draw, so the dropout stream does not depend on the schedule.
        let random = self.rng_drop.chance(p);
        scheduled || random
    }

    /// Fill `frame` for time `t` from the truth.
    #[allow(clippy::too_many_arguments, clippy::too_many_lines)]
    pub fn produce(
        &mut self,
        sc: &Scenario,
        world: &World,
        body: &Body,
        head_velocity: V3,
        sample: &FlowSample,
        t: f64,
        frame: &mut FrameRecord,
    ) {
        frame.time_s = self.stamp(sc, t);
        let gas = world.gas();
        let sp = &sc.sensors.probe;

        // ---- probe
        let v_rel_map = vec3::sub(sample.velocity_m_per_s, head_velocity);
        let v_rel_head = body.to_module_dir(0, v_rel_map);
        probe_truth::port_pressures(
            &gas,
            &self.normals_head,
            v_rel_head,
            sample.static_pressure_pa,
            sample.density_kg_per_m3,
            &mut self.truth_ports,
        );
        for i in 0..self.nports {
            let mut x = self.truth_ports[i];
            let mut blocked = false;
            for f in &sc.faults {
                if !f.active(t) {
                    continue;
                }
                match f.kind {
                    FaultKind::PortLeak { port, fraction } if port == i => {
                        x += fraction * (sample.static_pressure_pa - x);
                    }
                    FaultKind::PortBlocked { port } if port == i => blocked = true,
                    _ => {}
                }
            }
            if !self.lag_ready {
                self.lag[i] = x;
            }
            if blocked {
                let hold = *self.blocked_hold[i].get_or_insert(self.lag[i]);
                x = hold;
            } else {
                self.blocked_hold[i] = None;
            }
            self.lag[i] += self.lag_alpha * (x - self.lag[i]);
        }
        self.lag_ready = true;
        // Delay line: write now, read delay_steps ago (the oldest available
        // before it fills).
        let n = self.nports;
        let slots = self.delay_steps + 1;
        let w = self.delay_head;
        self.delay[w * n..(w + 1) * n].copy_from_slice(&self.lag);
        self.delay_filled = (self.delay_filled + 1).min(slots);
        let back = self.delay_filled - 1;
        let r = (w + slots - back) % slots;
        self.delay_head = (w + 1) % slots;
        let mut ports = core::mem::take(&mut self.port_buf);
        if let Some(p) = frame.port_pressures_pa.take() {
            ports = p;
        }
        ports.clear();
        for i in 0..n {
            let mut y = self.delay[r * n + i] + sp.bias_pa[i] + self.rng_probe.gauss(sp.noise_pa);
            let stuck = sc.faults.iter().any(|f| {
                f.active(t) && matches!(f.kind, FaultKind::PortStuck { port } if port == i)
            });
            if stuck {
                y = *self.stuck_hold[i].get_or_insert(self.last_out[i]);
            } else {
                self.stuck_hold[i] = None;
            }
            self.last_out[i] = y;
            ports.push(y);
        }
        if self.dropped(sc, t, Channel::Probe, sp.dropout_probability) {
            self.port_buf = ports;
            frame.port_pressures_pa = None;
        } else {
            frame.port_pressures_pa = Some(ports);
        }

        // ---- temperature
        let tn = sc.sensors.temperature;
        let temp = sample.total_temperature_k + self.rng_temp.gauss(tn.noise_k);
        frame.total_temperature_k =
            (tn.enabled && !self.dropped(sc, t, Channel::Temperature, 0.0)).then_some(temp);

        // ---- pose
        let q_true = body.head_quaternion_wxyz();
        let qt = UnitQuaternion::from_quaternion(nalgebra::Quaternion::new(
            q_true[0], q_true[1], q_true[2], q_true[3],
        ));
        let e = self.odo_att_err;
        let qr = UnitQuaternion::from_scaled_axis(Vector3::new(e[0], e[1], e[2])) * qt;
        let o = &sc.sensors.odometry;
        let pose = PoseRecord {
            position_m: vec3::add(body.head(), self.odo_pos_err),
            orientation_wxyz: [qr.w, qr.i, qr.j, qr.k],
            position_sigma_m: o.position_walk_m_per_sqrt_m * libm::sqrt(self.travelled_m)
                + o.scale_error.abs() * self.travelled_m
                + o.attitude_walk_rad_per_sqrt_m * libm::pow(self.travelled_m, 1.5),
            attitude_sigma_rad: o.attitude_walk_rad_per_sqrt_m * libm::sqrt(self.travelled_m),
        };
        frame.pose = (!self.dropped(sc, t, Channel::Pose, o.dropout_probability)).then_some(pose);

        // ---- joints
        let jn = sc.sensors.joints;
        let mut js = core::mem::take(&mut self.joint_buf);
        if let Some(j) = frame.joints.take() {
            js = j;
        }
        js.clear();
        for j in &body.joints {
            js.push(JointRecord {
                pitch_rad: j.pitch_rad + self.rng_joint.gauss(jn.noise_rad),
                yaw_rad: j.yaw_rad + self.rng_joint.gauss(jn.noise_rad),
            });
        }
        if self.dropped(sc, t, Channel::Joints, jn.dropout_probability) {
            self.joint_buf = js;
        } else {
            frame.joints = Some(js);
        }

        // ---- contacts
        let cn = sc.sensors.contact;
        frame.contacts.clear();
        self.skin = SkinState::default();
        let g = &world.geometry;
        for (k, m) in sc.robot.modules.iter().enumerate() {
            // Quick reject: every skin point lies within L/2 + r of the
            // module's mid-axis point, and clearance is 1-Lipschitz.
            let mid = body.module_point(k, [-0.5 * m.length_m, 0.0, 0.0]);
            if g.clearance_m(mid) > 0.5 * m.length_m + m.radius_m + 1e-3 {
                continue;
            }
            for (si, s) in m.sensors.iter().enumerate() {
                let psi = s.angle_deg.to_radians();
                let (c, sn) = (libm::cos(psi), libm::sin(psi));
                // Side skin `(-s, r cos psi, r sin psi)`; nose cap
                // `r (cos theta, sin theta cos psi, sin theta sin psi)` (the
                // head ball the motion keeps clear of the walls).
                let (p, cap_dir) = match s.cap_polar_deg {
                    Some(th) => {
                        let (st, ct) = (libm::sin(th.to_radians()), libm::cos(th.to_radians()));
                        let d = [ct, st * c, st * sn];
                        (body.module_point(k, vec3::scale(d, m.radius_m)), Some(d))
                    }
                    None => (
                        body.module_point(k, [-s.axial_m, m.radius_m * c, m.radius_m * sn]),
                        None,
                    ),
                };
                let Some(h) = g.best_hit(p) else { continue };
                if h.clearance_m >= 0.0 {
                    continue;
                }
                let pen = -h.clearance_m;
                let force = cn.stiffness_n_per_m * pen + self.rng_contact.gauss(cn.noise_n);
                self.skin.max_penetration_m = self.skin.max_penetration_m.max(pen);
                if force >= cn.threshold_n {
                    self.skin.touching += 1;
                }
                let dead = sc.faults.iter().any(|f| {
                    f.active(t) && matches!(f.kind, FaultKind::ContactDead { module, sensor } if module == k && sensor == si)
                });
                if dead || force < cn.threshold_n {
                    continue;
                }
                let normal = if let (true, Some(d)) = (s.measures_normal, cap_dir) {
                    // A cap cell measures along its own axis.
                    let noisy = [
                        d[0] + self.rng_contact.gauss(cn.normal_noise_rad),
                        d[1] + self.rng_contact.gauss(cn.normal_noise_rad),
                        d[2] + self.rng_contact.gauss(cn.normal_noise_rad),
                    ];
                    Some(vec3::unit(noisy).unwrap_or(d))
                } else if s.measures_normal {
                    let out =
                        vec3::unit(h.offset).unwrap_or_else(|| body.module_dir(k, [0.0, c, sn]));
                    let nm = body.to_module_dir(k, out);
                    let noisy = [
                        nm[0] + self.rng_contact.gauss(cn.normal_noise_rad),
                        nm[1] + self.rng_contact.gauss(cn.normal_noise_rad),
                        nm[2] + self.rng_contact.gauss(cn.normal_noise_rad),
                    ];
                    Some(vec3::unit(noisy).unwrap_or(nm))
                } else {
                    None
                };
                frame.contacts.push(ContactRecord {
                    module: u16::try_from(k).unwrap_or(u16::MAX),
                    sensor: u16::try_from(si).unwrap_or(u16::MAX),
                    force_n: force,
                    normal_module: normal,
                });
            }
        }
        let silent = self.dropped(sc, t, Channel::Contacts, cn.dropout_probability);
        if silent {
            frame.contacts.clear();
        }
        frame.contacts_reported = !silent;
    }
}

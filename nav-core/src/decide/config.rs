//! Decision thresholds.

/// Decision thresholds. Validated by the navigator's config.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct DecideConfig {
    /// Robot (module) radius, m.
    pub robot_radius_m: f64,
    /// Standoff margin: required standoff = radius + margin, m.
    pub standoff_margin_m: f64,
    /// Width margin: a branch needs clear width >= 2 radius + margin, m.
    pub width_margin_m: f64,
    /// Cruise speed, m/s.
    pub cruise_speed_m_per_s: f64,
    /// Creep speed (near walls, flow-only, back-out), m/s.
    pub creep_speed_m_per_s: f64,
    /// Speed cap near junctions, m/s.
    pub junction_speed_m_per_s: f64,
    /// Speed cap when the clearance is unknown (the skin is quiet and no
    /// cross-section is known), m/s: slow enough that the first touch of
    /// an unseen wall is gentle.
    pub feel_speed_m_per_s: f64,
    /// Standoff excess over which speed ramps from creep to cruise, m.
    pub slow_band_m: f64,
    /// Look-ahead distance for throats, m.
    pub throat_lookahead_m: f64,
    /// Centring gain (dimensionless).
    pub centring_gain: f64,
    /// Dynamic pressure below which the flow counts as lost, Pa.
    pub min_dynamic_pressure_pa: f64,
    /// Time flow must stay lost before back-out, s.
    pub lost_flow_s: f64,
    /// Branch flux below which a branch counts as carrying no flow, kg/s.
    pub min_branch_flux_kg_per_s: f64,
    /// Hysteresis: a challenger must exceed the incumbent's flux by this
    /// fraction to take over.
    pub branch_hysteresis_frac: f64,
    /// Samples per branch before a choice.
    pub min_branch_samples: u32,
    /// Longest dwell sampling one branch, s.
    pub sample_timeout_s: f64,
    /// Head alignment within which a sample counts, rad.
    pub sample_align_rad: f64,
    /// Openings within this of a known junction anchor merge into it, and
    /// the branch is "entered" once this far from the anchor, m.
    pub junction_radius_m: f64,
    /// Angle between fused upstream and the conduit axis that counts as
    /// flow divergence, rad.
    pub divergence_rad: f64,
    /// Relative continuity residual tolerated, |sum - trunk| / trunk.
    pub continuity_tolerance: f64,
    /// Back-out: a station counts as reached within this distance, m.
    pub arrive_m: f64,
    /// Branches whose direction has cosine below this with the trunk
    /// upstream direction are "the way we came".
    pub came_from_cos: f64,
    /// Skin compliance: how far the skin gives before the module's shell
    /// meets the wall, m.
    pub skin_compliance_m: f64,
    /// Sensing latency: from a touch to the command that answers it (the
    /// contact and pose sampling, one frame, the drive's response), s.
    pub sensing_latency_s: f64,
    /// Stall watch: the smallest distance a window must command, m (a few
    /// odometry noise sigmas, so noise cannot fake progress).
    pub stall_distance_m: f64,
    /// Stall watch: a window whose odometry progress is below this fraction
    /// of the commanded distance is a stall.
    pub stall_fraction: f64,
}

impl DecideConfig {
    /// Required standoff, m.
    #[must_use]
    pub fn required_standoff_m(&self) -> f64 {
        self.robot_radius_m + self.standoff_margin_m
    }
    /// Fastest approach speed near walls: the speed at which the head,
    /// touching a wall it had not felt, stops within the skin compliance
    /// given the sensing latency (`compliance / latency`), m/s.
    #[must_use]
    pub fn touch_speed_m_per_s(&self) -> f64 {
        self.skin_compliance_m / self.sensing_latency_s
    }
    /// Stall window at commanded speed `v`: the sensing latency twice (the
    /// odometry shows motion that late, at both ends of the window) plus
    /// the time to command `stall_distance_m`, s.
    #[must_use]
    pub fn stall_window_s(&self, speed_m_per_s: f64) -> f64 {
        let v = if speed_m_per_s > self.creep_speed_m_per_s {
            speed_m_per_s
        } else {
            self.creep_speed_m_per_s
        };
        2.0 * self.sensing_latency_s + self.stall_distance_m / v
    }
    /// Required branch / throat clear width, m.
    #[must_use]
    pub fn required_width_m(&self) -> f64 {
        2.0 * self.robot_radius_m + self.width_margin_m
    }
}

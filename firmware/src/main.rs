//! Minimal Cortex-M4F firmware: builds the demo navigator in a static slot
//! from the configuration in the embedded frame file, steps it over every
//! frame, and prints through semihosting:
//!
//! ```text
//! target_step instructions_per_step=<n> stack_bytes=<s> text_bytes=<t> ...
//! ```
//!
//! - instructions: with qemu's `-icount shift=0` every guest instruction
//!   advances the virtual clock by 1 ns; SysTick runs from the 25 MHz CPU
//!   clock of the MPS2 board model, so one SysTick count is 40
//!   instructions. Counted around each `step` call only (not the frame
//!   decoding), summed over all steps, and the largest single step.
//! - stack: the stack below `main`'s frame is painted before the steps and
//!   scanned after them: the deepest word written during any step (and,
//!   separately, during `init`).
//! - text_bytes: the linker's `.text` size (the code), from its symbols.
//!
//! It then prints the command digest (`Command::digest_into` over every
//! step), which must equal the host's (`firmware_frames` prints it).
#![no_std]
#![no_main]

use core::mem::MaybeUninit;
use cortex_m::peripheral::SYST;
use cortex_m::peripheral::syst::SystClkSource;
use cortex_m_rt::entry;
use cortex_m_semihosting::{debug, hprintln};
use nav_c::{UPC_MAX_MODULES, UPC_MAX_PORTS, UPC_MAX_SENSORS, UpcConfig, upc_config_default};
use nav_core::digest::Fnv64;
use nav_core::frame::{Contact, HeadPose, JointAngles, SensorFrame};
use nav_core::onboard::DemoFrameNavigator;

static FRAMES: &[u8] = include_bytes!(concat!(env!("OUT_DIR"), "/frames.bin"));

/// The navigator's static slot (about 86 KB of .bss).
static mut SLOT: MaybeUninit<DemoFrameNavigator<7>> = MaybeUninit::uninit();

const PAINT: u32 = 0x5AFE_C0DE;

unsafe extern "C" {
    static __stext: u8;
    static __etext: u8;
    static __sheap: u32;
}

struct Cursor<'a> {
    b: &'a [u8],
}

impl Cursor<'_> {
    fn take<const N: usize>(&mut self) -> Option<[u8; N]> {
        let (h, t) = self.b.split_at_checked(N)?;
        self.b = t;
        h.try_into().ok()
    }
    fn u8(&mut self) -> Option<u8> {
        self.take::<1>().map(|b| b[0])
    }
    fn u16(&mut self) -> Option<u16> {
        self.take::<2>().map(u16::from_le_bytes)
    }
    fn u32(&mut self) -> Option<u32> {
        self.take::<4>().map(u32::from_le_bytes)
    }
    fn f64(&mut self) -> Option<f64> {
        self.take::<8>().map(f64::from_le_bytes)
    }
}

fn config(c: &mut Cursor<'_>) -> Option<UpcConfig> {
    let mut cfg = upc_config_default();
    cfg.module_count = c.u32()?;
    for k in 0..(cfg.module_count as usize).min(UPC_MAX_MODULES) {
        cfg.modules[k].length_m = c.f64()?;
        cfg.modules[k].radius_m = c.f64()?;
    }
    cfg.sensor_count = c.u32()?;
    for k in 0..(cfg.sensor_count as usize).min(UPC_MAX_SENSORS) {
        cfg.sensors[k].module = c.u16()?;
        cfg.sensors[k].axial_m = c.f64()?;
        cfg.sensors[k].angle_rad = c.f64()?;
        // NaN: a side-skin sensor; otherwise its nose-cap polar angle.
        let polar_rad = c.f64()?;
        cfg.sensors[k].on_nose_cap = !polar_rad.is_nan();
        cfg.sensors[k].cap_polar_rad = if polar_rad.is_nan() { 0.0 } else { polar_rad };
    }
    cfg.joint_sigma_rad = c.f64()?;
    cfg.probe_layout = c.u32()?;
    cfg.cone_angle_rad = c.f64()?;
    cfg.port_count = c.u32()?;
    for k in 0..(cfg.port_count as usize).min(UPC_MAX_PORTS) {
        for v in cfg.port_normals[k].iter_mut() {
            *v = c.f64()?;
        }
    }
    cfg.port_noise_pa = c.f64()?;
    cfg.gas_gamma = c.f64()?;
    cfg.gas_r_j_per_kg_k = c.f64()?;
    cfg.assumed_static_temperature_k = c.f64()?;
    cfg.cruise_speed_m_per_s = c.f64()?;
    cfg.min_dynamic_pressure_pa = c.f64()?;
    cfg.section_every = c.u32()?;
    cfg.throat_every = c.u32()?;
    cfg.throat_stations = c.u32()?;
    Some(cfg)
}

fn frame(c: &mut Cursor<'_>, f: &mut SensorFrame<7, 7, 64>) -> Option<()> {
    *f = SensorFrame::empty(c.f64()?);
    let flags = c.u8()?;
    if flags & 1 != 0 {
        let mut v = [0.0; 9];
        for x in v.iter_mut() {
            *x = c.f64()?;
        }
        f.pose = Some(HeadPose {
            position_m: [v[0], v[1], v[2]],
            orientation_wxyz: [v[3], v[4], v[5], v[6]],
            position_sigma_m: v[7],
            attitude_sigma_rad: v[8],
        });
    }
    if flags & 2 != 0 {
        let n = c.u8()? as usize;
        let mut js = [JointAngles::default(); 7];
        for k in 0..n {
            let j = JointAngles {
                pitch_rad: c.f64()?,
                yaw_rad: c.f64()?,
            };
            *js.get_mut(k)? = j;
        }
        f.joints = Some(js);
    }
    if flags & 4 != 0 {
        let mut p = [0.0; 7];
        for x in p.iter_mut() {
            *x = c.f64()?;
        }
        f.port_pressures_pa = Some(p);
    }
    if flags & 8 != 0 {
        f.total_temperature_k = Some(c.f64()?);
    }
    // Bit 16: the contact channel reported (a quiet skin, not a silent one).
    f.contacts_reported = flags & 16 != 0;
    let n = c.u8()?;
    for _ in 0..n {
        let module = c.u16()?;
        let sensor = c.u16()?;
        let force_n = c.f64()?;
        let normal_module = if c.u8()? != 0 {
            Some([c.f64()?, c.f64()?, c.f64()?])
        } else {
            None
        };
        f.push_contact(Contact {
            module,
            sensor,
            force_n,
            normal_module,
        });
    }
    Some(())
}

fn sp() -> usize {
    cortex_m::register::msp::read() as usize
}

/// Paint the stack from the end of .bss up to `margin` bytes below the
/// current stack pointer.
fn paint(margin: usize) -> (usize, usize) {
    let lo = core::ptr::addr_of!(__sheap) as usize;
    let hi = sp() - margin;
    let mut p = lo;
    while p < hi {
        // SAFETY: between the end of .bss (the heap start, unused) and
        // below the live stack: memory nothing else uses.
        unsafe { (p as *mut u32).write_volatile(PAINT) };
        p += 4;
    }
    (lo, hi)
}

/// The deepest painted word overwritten since `paint`: bytes used below
/// `top`.
fn deepest(lo: usize, hi: usize, top: usize) -> usize {
    let mut p = lo;
    while p < hi {
        // SAFETY: the painted region.
        if unsafe { (p as *const u32).read_volatile() } != PAINT {
            break;
        }
        p += 4;
    }
    top - p
}

/// The SysTick counter (counts down from 0xFF_FFFF).
fn ticks() -> u32 {
    SYST::get_current()
}

#[entry]
fn main() -> ! {
    let mut cp = cortex_m::Peripherals::take().unwrap();
    cp.SYST.set_clock_source(SystClkSource::Core);
    cp.SYST.set_reload(0x00FF_FFFF);
    cp.SYST.clear_current();
    cp.SYST.enable_counter();

    // Check the instruction clock: a loop of exactly 2 instructions per
    // pass (subs, bne), 1 000 000 passes.
    let t0 = ticks();
    // SAFETY: a register-only countdown loop.
    unsafe {
        core::arch::asm!(
            "2:",
            "subs {n}, {n}, #1",
            "bne 2b",
            n = inout(reg) 1_000_000u32 => _,
            options(nomem, nostack),
        );
    }
    let t1 = ticks();
    let calibration = u64::from(t0.wrapping_sub(t1) & 0x00FF_FFFF) * 40;

    let mut c = Cursor { b: FRAMES };
    let cfg = config(&mut c).unwrap();
    let count = c.u32().unwrap();
    let onboard = nav_c::onboard_config_for::<7>(&cfg).unwrap();

    // Build in place, measuring the stack init needs.
    let top = sp();
    let (lo, hi) = paint(256);
    // SAFETY: the only reference to SLOT, taken once.
    let slot = unsafe { &mut *core::ptr::addr_of_mut!(SLOT) };
    let nav = match DemoFrameNavigator::<7>::init(slot, onboard) {
        Ok(n) => n,
        Err(_) => {
            hprintln!("init failed");
            debug::exit(debug::EXIT_FAILURE);
            loop {
                cortex_m::asm::wfi();
            }
        }
    };
    let init_stack = deepest(lo, hi, top);

    let mut f = SensorFrame::<7, 7, 64>::empty(0.0);
    let mut d = Fnv64::new();
    let mut total: u64 = 0;
    let mut worst: u32 = 0;
    let mut worst_at: u32 = 0;
    let top = sp();
    let (lo, hi) = paint(512);
    for k in 0..count {
        if frame(&mut c, &mut f).is_none() {
            hprintln!("frame file truncated");
            debug::exit(debug::EXIT_FAILURE);
        }
        let t0 = ticks();
        let cmd = nav.step(&f);
        let t1 = ticks();
        // SysTick counts down, 24 bits.
        let dt = t0.wrapping_sub(t1) & 0x00FF_FFFF;
        total += u64::from(dt);
        if dt > worst {
            worst = dt;
            worst_at = k;
        }
        cmd.digest_into(&mut d);
    }
    let step_stack = deepest(lo, hi, top);
    // One SysTick count is 40 instructions (see the module doc).
    let per_step = total * 40 / u64::from(count.max(1));
    let text = core::ptr::addr_of!(__etext) as usize - core::ptr::addr_of!(__stext) as usize;
    hprintln!(
        "target_step instructions_per_step={} stack_bytes={} text_bytes={} worst_step_instructions={} worst_step_index={} init_stack_bytes={} steps={} section_fits={} navigator_bytes={}",
        per_step,
        step_stack,
        text,
        u64::from(worst) * 40,
        worst_at,
        init_stack,
        count,
        nav.counters().section_fits,
        core::mem::size_of::<DemoFrameNavigator<7>>()
    );
    hprintln!(
        "clock_check loop_instructions=2000000 counted={}",
        calibration
    );
    hprintln!("command_digest={:016x}", d.finish());
    debug::exit(debug::EXIT_SUCCESS);
    loop {
        cortex_m::asm::wfi();
    }
}

#[panic_handler]
fn panic(info: &core::panic::PanicInfo<'_>) -> ! {
    hprintln!("panic: {}", info);
    debug::exit(debug::EXIT_FAILURE);
    loop {
        cortex_m::asm::wfi();
    }
}

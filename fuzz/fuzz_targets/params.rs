//! Parameter validation on arbitrary f32 bit patterns: `Params::validate` and `Guard::new`
//! return an error or a guard, never panic; a guard that is built runs a few periods.
#![no_main]

use coilward::thermal::{ClampThermal, CoilThermal, FosterStage};
use coilward::{
    ClampPath, CoilParams, ControlParams, Guard, GuardLimits, Input, Params, Retry, SupplyParams,
    SwitchParams, Volts,
};
use libfuzzer_sys::fuzz_target;

struct Bytes<'a>(&'a [u8]);

impl Bytes<'_> {
    fn u32(&mut self) -> u32 {
        let mut b = [0u8; 4];
        for (k, x) in b.iter_mut().enumerate() {
            *x = self.0.get(k).copied().unwrap_or(0);
        }
        self.0 = self.0.get(4..).unwrap_or(&[]);
        u32::from_le_bytes(b)
    }
    fn f32(&mut self) -> f32 {
        f32::from_bits(self.u32())
    }
}

fuzz_target!(|data: &[u8]| {
    let mut b = Bytes(data);
    let clamp = match b.u32() % 4 {
        0 => ClampPath::None,
        1 => ClampPath::Freewheel {
            forward_drop: b.f32(),
            resistance: b.f32(),
        },
        2 => ClampPath::FreewheelZener {
            forward_drop: b.f32(),
            zener_voltage: b.f32(),
            resistance: b.f32(),
        },
        _ => ClampPath::SwitchClamp {
            clamp_voltage: b.f32(),
            resistance: b.f32(),
        },
    };
    let mut coil = CoilParams::new(b.f32(), b.f32());
    coil.reference_temperature = b.f32();
    coil.temperature_coefficient = b.f32();
    coil.winding_temperature = b.f32();
    coil.node_capacitance = if b.u32() % 2 == 0 {
        None
    } else {
        Some(b.f32())
    };
    let params = Params::new(
        SupplyParams::new(b.f32(), b.f32(), b.f32()),
        coil,
        SwitchParams::new(b.f32(), b.f32()),
        clamp,
        ControlParams::new(b.f32(), b.u32() % 70_000, b.f32()),
    );
    let _ = params.validate();
    let mut limits = GuardLimits::new(b.f32(), b.f32(), b.f32());
    let flags = b.u32();
    if flags & 1 != 0 {
        limits.clamp_pulse_energy = Some(b.f32());
    }
    if flags & 2 != 0 {
        limits.clamp_thermal = Some(ClampThermal::new(
            [
                FosterStage::new(b.f32(), b.f32()),
                FosterStage::new(b.f32(), b.f32()),
                FosterStage::UNUSED,
            ],
            b.f32(),
            b.f32(),
        ));
    }
    if flags & 4 != 0 {
        limits.coil_thermal = Some(CoilThermal::new(
            b.f32(),
            b.f32(),
            b.f32(),
            b.f32(),
            b.f32(),
        ));
    }
    if flags & 8 != 0 {
        limits.retry = Some(Retry::new(b.f32(), (b.u32() % 256) as u8));
    }
    if let Ok(guard) = Guard::new(&params, &limits) {
        let mut state = guard.start_after_reset();
        for _ in 0..16 {
            let out = guard.tick(&mut state, Input::new(b.u32(), Volts::from_bits(b.u32())));
            assert!(out.duty <= params.control.duty_resolution.max(1));
        }
    }
});

//! Demo: audit a candle custom op of the orchard frost model, with its own
//! hand-written `bwd`, and a copy of it with a planted bug.
//!
//! The op is the dew-point spread of a weather station: air temperature
//! minus dew point, from the temperature and the relative humidity (the
//! smaller the spread on a clear evening, the likelier frost by morning).
//! The dew point comes from the Magnus formula,
//!
//!   γ = ln(RH/100) + b·T/(c + T),   T_d = c·γ/(b − γ),   spread = T − T_d,
//!
//! with b = 17.62 and c = 243.12 °C, the coefficients over water of
//! D. Sonntag, "Important new values of the physical constants of 1986,
//! vapour pressure formulations based on the ITS-90, and psychrometer
//! formulae", Z. Meteorol. 40 (1990) — title and values quoted from memory.
//! The planted bug drops the minus sign of ∂spread/∂RH; the audit calls it
//! a flipped sign on that row.
//!
//! Run: `cargo run --features candle --example candle_op`

use candle_core::cpu_backend::binary_map;
use candle_core::{CpuStorage, CustomOp2, Layout, Shape};
use plumbline::candle::CustomOp2Layer;
use plumbline::{Args, Audit, Scalar, Tensor};

/// Magnus coefficients over water (Sonntag 1990, from memory).
const B: f64 = 17.62;
const C: f64 = 243.12;

/// Air temperature (°C) minus dew point (°C), per station and hour.
struct DewPointSpread {
    /// PLANTED BUG when true: ∂spread/∂RH loses its minus sign.
    planted_bug: bool,
}

/// spread(T, RH) in any float precision.
fn spread<T: Scalar>(t: T, rh: T) -> T {
    let (b, c) = (T::from(B).unwrap(), T::from(C).unwrap());
    let gamma = (rh / T::from(100.0).unwrap()).ln() + b * t / (c + t);
    t - c * gamma / (b - gamma)
}

impl CustomOp2 for DewPointSpread {
    fn name(&self) -> &'static str {
        "dew_point_spread"
    }

    fn cpu_fwd(
        &self,
        s1: &CpuStorage,
        l1: &Layout,
        s2: &CpuStorage,
        l2: &Layout,
    ) -> candle_core::Result<(CpuStorage, Shape)> {
        if l1.dims() != l2.dims() {
            candle_core::bail!("dew_point_spread: temperature and humidity differ in shape");
        }
        let out = match (s1, s2) {
            (CpuStorage::F32(t), CpuStorage::F32(rh)) => {
                CpuStorage::F32(binary_map(l1, l2, t, rh, spread::<f32>))
            }
            (CpuStorage::F64(t), CpuStorage::F64(rh)) => {
                CpuStorage::F64(binary_map(l1, l2, t, rh, spread::<f64>))
            }
            _ => candle_core::bail!("dew_point_spread: f32 or f64 arguments of one dtype"),
        };
        Ok((out, l1.shape().clone()))
    }

    fn bwd(
        &self,
        t: &candle_core::Tensor,
        rh: &candle_core::Tensor,
        _res: &candle_core::Tensor,
        grad_res: &candle_core::Tensor,
    ) -> candle_core::Result<(Option<candle_core::Tensor>, Option<candle_core::Tensor>)> {
        // γ and the two partial derivatives of T_d = c·γ/(b − γ):
        // dT_d/dγ = c·b/(b − γ)², dγ/dT = b·c/(c + T)², dγ/dRH = 1/RH.
        let gamma = ((rh / 100.0)?.log()? + ((t * B)? / t.affine(1.0, C)?)?)?;
        let dtd_dgamma = (gamma.affine(-1.0, B)?.sqr()?.recip()? * (C * B))?;
        let dgamma_dt = (t.affine(1.0, C)?.sqr()?.recip()? * (B * C))?;
        let d_t = dtd_dgamma.mul(&dgamma_dt)?.affine(-1.0, 1.0)?;
        let d_rh = dtd_dgamma.div(rh)?;
        let d_rh = if self.planted_bug { d_rh } else { d_rh.neg()? };
        Ok((Some(d_t.mul(grad_res)?), Some(d_rh.mul(grad_res)?)))
    }
}

fn main() -> Result<(), plumbline::Error> {
    // Evening readings of four stations over three hours (invented data).
    let shape = [4, 3];
    let temperature = Tensor::new(
        shape.to_vec(),
        vec![
            6.5_f32, 4.0, 2.5, 8.0, 6.0, 3.5, 3.0, 1.5, 0.5, 9.5, 7.0, 5.5,
        ],
    )?;
    let humidity = Tensor::new(
        shape.to_vec(),
        vec![
            71.0_f32, 80.0, 88.0, 62.0, 70.0, 81.0, 85.0, 91.0, 96.0, 55.0, 64.0, 72.0,
        ],
    )?;
    let args = Args::new(vec![temperature, humidity], vec![]);

    for planted_bug in [false, true] {
        let layer = CustomOp2Layer::<_, f32>::new(DewPointSpread { planted_bug }, shape, shape)
            .with_names(["temperature", "humidity"], "spread");
        let name = if planted_bug {
            "dew_point_spread (planted bug)"
        } else {
            "dew_point_spread"
        };
        let report = Audit::new().seed(2026).name(name).run(&layer, &args)?;
        println!("{report}");
    }
    Ok(())
}

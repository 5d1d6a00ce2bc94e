//! Transport estimates: diffusion coefficients from a hop barrier or a measurement, their
//! temperature dependence, ionic conductivity, and what bulk diffusion allows at a given C-rate.
//!
//! Everything here is handbook physics applied to one number (a barrier or a measured D), so the
//! results are screening estimates. Rate figures are **upper bounds set by bulk transport** in the
//! active material: real electrodes are often limited first by the electrolyte, by contacts and by
//! the counter electrode. The hopping model is a single-barrier, dilute-carrier picture: it
//! ignores lattice relaxation and ion-ion correlation at high filling.
//!
//! Units at the API boundary: temperatures in K, energies in eV, hop lengths in A, diffusion
//! coefficients in m^2/s, times in s, particle sizes in nm or um as the name says.

use std::fmt;

/// Boltzmann constant, eV/K (CODATA 2018, exact since the 2019 SI redefinition).
pub const BOLTZMANN_EV_PER_K: f64 = 8.617_333_262e-5;
/// Boltzmann constant, J/K (CODATA 2018, exact).
pub const BOLTZMANN_J_PER_K: f64 = 1.380_649e-23;
/// Elementary charge, C (CODATA 2018, exact).
pub const ELEMENTARY_CHARGE_C: f64 = 1.602_176_634e-19;
/// Faraday constant, C/mol (CODATA 2018; e times N_A).
pub const FARADAY_C_PER_MOL: f64 = 96_485.332_12;
/// Avogadro constant, 1/mol (CODATA 2018, exact).
pub const AVOGADRO_PER_MOL: f64 = 6.022_140_76e23;

/// Attempt frequency used when none is given, 1/s. An optical-phonon-scale value, common
/// practice for ionic hopping; real values range over roughly 1e12 to 1e14 /s.
pub const DEFAULT_ATTEMPT_FREQUENCY_HZ: f64 = 1e13;
/// Room temperature of tables and single-number summaries, K.
pub const ROOM_TEMPERATURE_K: f64 = 298.15;
/// Largest particle diameter (um) worth quoting as a rate limit: electrode coatings are some
/// 50-100 um thick and active particles are usually well below that (common practice), so a bulk
/// diffusion length beyond it means bulk diffusion is not what limits the rate, and summaries
/// say that in words instead of quoting a particle no electrode holds.
pub const PRACTICAL_PARTICLE_MAX_UM: f64 = 100.0;
/// C-rates of the default rate table: a C-rate of n is a full charge in 3600/n s.
pub const DEFAULT_C_RATES: [f64; 7] = [1.0, 2.0, 5.0, 10.0, 20.0, 30.0, 60.0];

/// Why a transport estimate could not be made.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum TransportError {
    /// A parameter outside its physical range; `name` is the parameter, `value` what was given.
    #[error("{name} = {value} is not allowed: {why}")]
    BadParameter {
        name: &'static str,
        value: f64,
        why: &'static str,
    },
    /// A measured D without an activation energy holds at its own temperature only.
    #[error(
        "the diffusion coefficient was measured at {measured_at_k} K and no activation energy \
         was given, so it cannot be used at {requested_k} K; give a measured or assumed \
         activation energy to extrapolate"
    )]
    NoTemperatureDependence {
        measured_at_k: f64,
        requested_k: f64,
    },
    /// An Arrhenius fit needs at least two distinct temperatures.
    #[error("an Arrhenius fit needs at least two distinct temperatures, got {0}")]
    TooFewTemperatures(usize),
}

fn positive(name: &'static str, value: f64) -> Result<f64, TransportError> {
    if value.is_finite() && value > 0.0 {
        Ok(value)
    } else {
        Err(TransportError::BadParameter {
            name,
            value,
            why: "must be a positive finite number",
        })
    }
}

fn dimension_ok(dimension: u8) -> Result<f64, TransportError> {
    if (1..=3).contains(&dimension) {
        Ok(dimension as f64)
    } else {
        Err(TransportError::BadParameter {
            name: "channel dimensionality",
            value: dimension as f64,
            why: "must be 1, 2 or 3",
        })
    }
}

/// Thermally activated hopping between equivalent sites:
///
/// `D = f (1 - c) a^2 nu0 exp(-Ea / kB T) / (2 d)`
///
/// with `a` the hop length, `nu0` the attempt frequency, `f` the correlation factor, `c` the
/// fraction of target sites already filled and `d` the dimensionality of the channel network
/// (1, 2 or 3). The defaults (`f = 1`, `c = 0`) are the **dilute limit**: a lone carrier in an
/// empty network, where every attempted hop finds its target free and successive hops are
/// uncorrelated. At higher filling both factors fall below 1 and the single-barrier picture itself
/// becomes doubtful.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct HoppingModel {
    /// Migration barrier Ea, eV (saddle minus site energy; zero is allowed).
    pub barrier_ev: f64,
    /// Hop length a, A.
    pub hop_length_a: f64,
    /// Dimensionality d of the percolating channel network: 1, 2 or 3.
    pub dimension: u8,
    /// Attempt frequency nu0, 1/s.
    pub attempt_frequency_hz: f64,
    /// Correlation factor f, in (0, 1].
    pub correlation_factor: f64,
    /// Site filling c, in [0, 1).
    pub site_filling: f64,
}

impl HoppingModel {
    /// A dilute-limit model (`f = 1`, `c = 0`, `nu0 = 1e13 /s`), checked for physical ranges.
    pub fn new(barrier_ev: f64, hop_length_a: f64, dimension: u8) -> Result<Self, TransportError> {
        let m = HoppingModel {
            barrier_ev,
            hop_length_a,
            dimension,
            attempt_frequency_hz: DEFAULT_ATTEMPT_FREQUENCY_HZ,
            correlation_factor: 1.0,
            site_filling: 0.0,
        };
        m.validate()?;
        Ok(m)
    }

    pub fn with_attempt_frequency(mut self, hz: f64) -> Result<Self, TransportError> {
        self.attempt_frequency_hz = hz;
        self.validate()?;
        Ok(self)
    }
    pub fn with_correlation_factor(mut self, f: f64) -> Result<Self, TransportError> {
        self.correlation_factor = f;
        self.validate()?;
        Ok(self)
    }
    pub fn with_site_filling(mut self, c: f64) -> Result<Self, TransportError> {
        self.site_filling = c;
        self.validate()?;
        Ok(self)
    }

    /// Checks every field; the fields are public, so call this after changing them by hand.
    pub fn validate(&self) -> Result<(), TransportError> {
        if !(self.barrier_ev.is_finite() && self.barrier_ev >= 0.0) {
            return Err(TransportError::BadParameter {
                name: "barrier (eV)",
                value: self.barrier_ev,
                why: "must be zero or positive",
            });
        }
        positive("hop length (A)", self.hop_length_a)?;
        dimension_ok(self.dimension)?;
        positive("attempt frequency (1/s)", self.attempt_frequency_hz)?;
        let f = self.correlation_factor;
        if !(f.is_finite() && f > 0.0 && f <= 1.0) {
            return Err(TransportError::BadParameter {
                name: "correlation factor",
                value: f,
                why: "must lie in (0, 1]",
            });
        }
        let c = self.site_filling;
        if !(c.is_finite() && (0.0..1.0).contains(&c)) {
            return Err(TransportError::BadParameter {
                name: "site filling",
                value: c,
                why: "must lie in [0, 1)",
            });
        }
        Ok(())
    }

    /// The temperature-independent prefactor `D0 = f (1 - c) a^2 nu0 / (2 d)`, m^2/s.
    pub fn prefactor_m2_s(&self) -> f64 {
        let a_m = self.hop_length_a * 1e-10;
        self.correlation_factor * (1.0 - self.site_filling) * a_m * a_m * self.attempt_frequency_hz
            / (2.0 * self.dimension as f64)
    }

    /// Diffusion coefficient at `t_kelvin`, m^2/s. The temperature must be positive; for a
    /// non-positive or non-finite temperature the result is NaN (use [`Transport::diffusion_at`]
    /// for a checked value).
    pub fn diffusion_coefficient(&self, t_kelvin: f64) -> f64 {
        if !(t_kelvin.is_finite() && t_kelvin > 0.0) {
            return f64::NAN;
        }
        self.prefactor_m2_s() * (-self.barrier_ev / (BOLTZMANN_EV_PER_K * t_kelvin)).exp()
    }
}

/// How a diffusion coefficient was measured.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum MeasurementMethod {
    /// Pulsed-field-gradient NMR (tracer-like self-diffusion).
    PfgNmr,
    /// Galvanostatic intermittent titration (chemical diffusion in an electrode).
    Gitt,
    /// Impedance spectroscopy (via a conductivity or a Warburg element).
    Impedance,
    /// Anything else, in the user's words.
    Other(String),
}

impl fmt::Display for MeasurementMethod {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            MeasurementMethod::PfgNmr => f.write_str("PFG-NMR"),
            MeasurementMethod::Gitt => f.write_str("GITT"),
            MeasurementMethod::Impedance => f.write_str("impedance"),
            MeasurementMethod::Other(s) => f.write_str(s),
        }
    }
}

/// Whether an activation energy attached to a measurement was itself measured or assumed.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ActivationOrigin {
    Measured,
    Assumed,
}

/// A diffusion coefficient the user measured at one temperature.
#[derive(Debug, Clone, PartialEq)]
pub struct MeasuredDiffusion {
    pub diffusion_m2_s: f64,
    pub temperature_k: f64,
    pub method: MeasurementMethod,
    /// Activation energy (eV) used to move the value to other temperatures, with its origin.
    /// Without it the value holds at `temperature_k` only.
    pub activation: Option<(f64, ActivationOrigin)>,
}

/// Where a diffusion coefficient comes from.
#[derive(Debug, Clone, PartialEq)]
pub enum Transport {
    /// Computed from a migration barrier with the hopping model.
    Hopping(HoppingModel),
    /// Measured by the user.
    Measured(MeasuredDiffusion),
}

/// A diffusion coefficient at one temperature, with a sentence on how it was obtained.
#[derive(Debug, Clone, PartialEq)]
pub struct DiffusionEstimate {
    pub temperature_k: f64,
    pub diffusion_m2_s: f64,
    pub basis: String,
}

/// Two temperatures closer than this (K) count as the same for a measurement without an
/// activation energy.
const SAME_TEMPERATURE_K: f64 = 0.01;

impl Transport {
    /// A measurement at one temperature, without temperature dependence.
    pub fn measured(
        diffusion_m2_s: f64,
        temperature_k: f64,
        method: MeasurementMethod,
    ) -> Result<Self, TransportError> {
        positive("measured diffusion coefficient (m^2/s)", diffusion_m2_s)?;
        positive("measurement temperature (K)", temperature_k)?;
        Ok(Transport::Measured(MeasuredDiffusion {
            diffusion_m2_s,
            temperature_k,
            method,
            activation: None,
        }))
    }

    /// Attaches an activation energy (eV) to a measurement so that it can be moved in
    /// temperature by Arrhenius' law. Has no effect on a hopping model.
    pub fn with_activation(
        self,
        activation_ev: f64,
        origin: ActivationOrigin,
    ) -> Result<Self, TransportError> {
        if !(activation_ev.is_finite() && activation_ev >= 0.0) {
            return Err(TransportError::BadParameter {
                name: "activation energy (eV)",
                value: activation_ev,
                why: "must be zero or positive",
            });
        }
        Ok(match self {
            Transport::Measured(mut m) => {
                m.activation = Some((activation_ev, origin));
                Transport::Measured(m)
            }
            other => other,
        })
    }

    /// The diffusion coefficient at `t_kelvin`. A measurement with an activation energy is moved
    /// by `D(T) = D(T0) exp(-Ea/kB (1/T - 1/T0))`; one without it answers only at its own
    /// temperature and is an error elsewhere.
    pub fn diffusion_at(&self, t_kelvin: f64) -> Result<DiffusionEstimate, TransportError> {
        positive("temperature (K)", t_kelvin)?;
        match self {
            Transport::Hopping(m) => {
                m.validate()?;
                Ok(DiffusionEstimate {
                    temperature_k: t_kelvin,
                    diffusion_m2_s: m.diffusion_coefficient(t_kelvin),
                    basis: format!(
                        "hopping model: Ea = {:.3} eV, a = {:.3} A, {}D, nu0 = {:.2e} /s, \
                         f = {}, c = {}",
                        m.barrier_ev,
                        m.hop_length_a,
                        m.dimension,
                        m.attempt_frequency_hz,
                        m.correlation_factor,
                        m.site_filling
                    ),
                })
            }
            Transport::Measured(m) => {
                let t0 = m.temperature_k;
                match m.activation {
                    None if (t_kelvin - t0).abs() <= SAME_TEMPERATURE_K => Ok(DiffusionEstimate {
                        temperature_k: t_kelvin,
                        diffusion_m2_s: m.diffusion_m2_s,
                        basis: format!("measured ({}) at {t0} K", m.method),
                    }),
                    None => Err(TransportError::NoTemperatureDependence {
                        measured_at_k: t0,
                        requested_k: t_kelvin,
                    }),
                    Some((ea, origin)) => {
                        let d = m.diffusion_m2_s
                            * (-ea / BOLTZMANN_EV_PER_K * (1.0 / t_kelvin - 1.0 / t0)).exp();
                        let o = match origin {
                            ActivationOrigin::Measured => "measured",
                            ActivationOrigin::Assumed => "assumed",
                        };
                        Ok(DiffusionEstimate {
                            temperature_k: t_kelvin,
                            diffusion_m2_s: d,
                            basis: format!(
                                "measured ({}) at {t0} K, moved to {t_kelvin} K with an {o} \
                                 activation energy of {ea:.3} eV",
                                m.method
                            ),
                        })
                    }
                }
            }
        }
    }
}

/// The temperatures of the default Arrhenius table, K: 250 to 400 K in steps of 25 K, with
/// room temperature (298.15 K) in its place.
pub fn default_temperatures_k() -> Vec<f64> {
    let mut t: Vec<f64> = (0..=6).map(|i| 250.0 + 25.0 * i as f64).collect();
    t.push(ROOM_TEMPERATURE_K);
    t.sort_by(f64::total_cmp);
    t
}

/// Evenly spaced temperatures from `start_k` to `end_k` inclusive in steps of `step_k` (K).
pub fn temperature_range_k(
    start_k: f64,
    end_k: f64,
    step_k: f64,
) -> Result<Vec<f64>, TransportError> {
    positive("start temperature (K)", start_k)?;
    positive("end temperature (K)", end_k)?;
    positive("temperature step (K)", step_k)?;
    if end_k < start_k {
        return Err(TransportError::BadParameter {
            name: "end temperature (K)",
            value: end_k,
            why: "must not be below the start temperature",
        });
    }
    let n = ((end_k - start_k) / step_k + 1e-9).floor() as usize;
    Ok((0..=n).map(|i| start_k + step_k * i as f64).collect())
}

/// One row of an Arrhenius table.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ArrheniusRow {
    pub temperature_k: f64,
    /// 1000 / T, 1/K (the usual abscissa of an Arrhenius plot).
    pub thousand_over_t_per_k: f64,
    pub diffusion_m2_s: f64,
    pub log10_diffusion: f64,
}

/// D at each temperature (K). Errors if any temperature is invalid or outside what the source
/// supports (a measurement without an activation energy).
pub fn arrhenius_table(
    source: &Transport,
    temperatures_k: &[f64],
) -> Result<Vec<ArrheniusRow>, TransportError> {
    temperatures_k
        .iter()
        .map(|&t| {
            let d = source.diffusion_at(t)?.diffusion_m2_s;
            Ok(ArrheniusRow {
                temperature_k: t,
                thousand_over_t_per_k: 1000.0 / t,
                diffusion_m2_s: d,
                log10_diffusion: d.log10(),
            })
        })
        .collect()
}

/// Result of a least-squares fit of `ln D = ln D0 - Ea / (kB T)`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ArrheniusFit {
    pub activation_energy_ev: f64,
    pub prefactor_m2_s: f64,
    /// Coefficient of determination of the straight line in (1/T, ln D); 1 for a perfect fit.
    pub r_squared: f64,
}

/// Fits `(T in K, D in m^2/s)` pairs by ordinary least squares on ln D against 1/T (equal
/// weights in ln D). Needs two or more distinct temperatures and positive D.
pub fn fit_arrhenius(points: &[(f64, f64)]) -> Result<ArrheniusFit, TransportError> {
    let mut xs = Vec::with_capacity(points.len());
    let mut ys = Vec::with_capacity(points.len());
    for &(t, d) in points {
        xs.push(1.0 / positive("temperature (K)", t)?);
        ys.push(positive("diffusion coefficient (m^2/s)", d)?.ln());
    }
    let n = xs.len() as f64;
    if xs.len() < 2 {
        return Err(TransportError::TooFewTemperatures(xs.len()));
    }
    let mx = xs.iter().sum::<f64>() / n;
    let my = ys.iter().sum::<f64>() / n;
    let sxx: f64 = xs.iter().map(|x| (x - mx) * (x - mx)).sum();
    let sxy: f64 = xs.iter().zip(&ys).map(|(x, y)| (x - mx) * (y - my)).sum();
    let syy: f64 = ys.iter().map(|y| (y - my) * (y - my)).sum();
    if !(sxx > 1e-30 * mx * mx) {
        return Err(TransportError::TooFewTemperatures(1));
    }
    let slope = sxy / sxx;
    let intercept = my - slope * mx;
    let ss_res: f64 = xs
        .iter()
        .zip(&ys)
        .map(|(x, y)| {
            let r = y - (intercept + slope * x);
            r * r
        })
        .sum();
    let r_squared = if syy > 0.0 { 1.0 - ss_res / syy } else { 1.0 };
    Ok(ArrheniusFit {
        activation_energy_ev: -slope * BOLTZMANN_EV_PER_K,
        prefactor_m2_s: intercept.exp(),
        r_squared,
    })
}

/// Carrier number density (1/m^3) from carriers per unit cell and the cell volume (A^3).
pub fn carrier_density_per_cell(
    carriers_per_cell: f64,
    cell_volume_a3: f64,
) -> Result<f64, TransportError> {
    positive("carriers per cell", carriers_per_cell)?;
    positive("cell volume (A^3)", cell_volume_a3)?;
    Ok(carriers_per_cell / (cell_volume_a3 * 1e-30))
}

/// Carrier number density (1/m^3) from carriers per formula unit, formula units per cell (Z)
/// and the cell volume (A^3).
pub fn carrier_density_per_formula_unit(
    carriers_per_formula_unit: f64,
    formula_units_per_cell: f64,
    cell_volume_a3: f64,
) -> Result<f64, TransportError> {
    positive("carriers per formula unit", carriers_per_formula_unit)?;
    positive("formula units per cell (Z)", formula_units_per_cell)?;
    carrier_density_per_cell(
        carriers_per_formula_unit * formula_units_per_cell,
        cell_volume_a3,
    )
}

/// An ionic conductivity.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Conductivity {
    pub siemens_per_m: f64,
}

impl Conductivity {
    pub fn siemens_per_cm(&self) -> f64 {
        self.siemens_per_m / 100.0
    }
}

/// Nernst-Einstein conductivity `sigma = n (z e)^2 D / (kB T)` with the Haven ratio taken as 1
/// (tracer and charge diffusion coefficients equal, i.e. no correlated motion of the carriers).
/// `carriers_per_m3` from [`carrier_density_per_cell`] or [`carrier_density_per_formula_unit`],
/// `charge_number` the carrier's charge in units of e (1 for Li+, 2 for Mg2+; the sign does not
/// matter).
pub fn nernst_einstein(
    carriers_per_m3: f64,
    charge_number: f64,
    diffusion_m2_s: f64,
    t_kelvin: f64,
) -> Result<Conductivity, TransportError> {
    positive("carrier density (1/m^3)", carriers_per_m3)?;
    positive("|charge number|", charge_number.abs())?;
    positive("diffusion coefficient (m^2/s)", diffusion_m2_s)?;
    positive("temperature (K)", t_kelvin)?;
    let q = charge_number.abs() * ELEMENTARY_CHARGE_C;
    Ok(Conductivity {
        siemens_per_m: carriers_per_m3 * q * q * diffusion_m2_s / (BOLTZMANN_J_PER_K * t_kelvin),
    })
}

/// Time for a full charge at C-rate `n`, s: `3600 / n`.
pub fn charge_time_s(c_rate: f64) -> Result<f64, TransportError> {
    Ok(3600.0 / positive("C-rate", c_rate)?)
}

/// Root-mean-square diffusion length `L = sqrt(2 d D t)`, m, for `d` = 1, 2 or 3 (3D:
/// `sqrt(6 D t)`). For a 1D channel this is the distance along the channel.
pub fn diffusion_length_m(
    diffusion_m2_s: f64,
    dimension: u8,
    time_s: f64,
) -> Result<f64, TransportError> {
    let d = dimension_ok(dimension)?;
    positive("diffusion coefficient (m^2/s)", diffusion_m2_s)?;
    positive("time (s)", time_s)?;
    Ok((2.0 * d * diffusion_m2_s * time_s).sqrt())
}

/// One row of a rate table.
///
/// Geometry rule, a screening convention: an ion must travel from the particle surface to its
/// centre within the charge time, so the largest particle that still charges fully has a
/// **diameter of 2L**. For a 1D conductor L is measured along the channel, so the limit applies
/// to the particle's extent along that direction.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct RateRow {
    pub c_rate: f64,
    pub charge_time_s: f64,
    pub diffusion_length_um: f64,
    pub max_particle_diameter_um: f64,
    pub max_particle_diameter_nm: f64,
}

/// Rate table for one diffusion coefficient (m^2/s) and channel dimensionality; pass
/// [`DEFAULT_C_RATES`] for 1C to 60C.
pub fn rate_table(
    diffusion_m2_s: f64,
    dimension: u8,
    c_rates: &[f64],
) -> Result<Vec<RateRow>, TransportError> {
    c_rates
        .iter()
        .map(|&n| {
            let t = charge_time_s(n)?;
            let l = diffusion_length_m(diffusion_m2_s, dimension, t)?;
            Ok(RateRow {
                c_rate: n,
                charge_time_s: t,
                diffusion_length_um: l * 1e6,
                max_particle_diameter_um: 2.0 * l * 1e6,
                max_particle_diameter_nm: 2.0 * l * 1e9,
            })
        })
        .collect()
}

/// The fastest C-rate at which bulk diffusion still reaches the centre of a particle of the
/// given diameter (nm): `t = (diameter/2)^2 / (2 d D)`, C-rate = 3600 / t. An upper bound from
/// bulk transport alone.
pub fn max_c_rate_for_particle(
    diffusion_m2_s: f64,
    dimension: u8,
    diameter_nm: f64,
) -> Result<f64, TransportError> {
    let d = dimension_ok(dimension)?;
    positive("diffusion coefficient (m^2/s)", diffusion_m2_s)?;
    let r = positive("particle diameter (nm)", diameter_nm)? * 0.5e-9;
    let t = r * r / (2.0 * d * diffusion_m2_s);
    Ok(3600.0 / t)
}

/// The diffusion coefficient (m^2/s) a particle of the given diameter (nm) needs to charge at
/// the given C-rate: `D = (diameter/2)^2 / (2 d t)` with `t = 3600 / C-rate`.
pub fn required_diffusion_m2_s(
    diameter_nm: f64,
    c_rate: f64,
    dimension: u8,
) -> Result<f64, TransportError> {
    let d = dimension_ok(dimension)?;
    let r = positive("particle diameter (nm)", diameter_nm)? * 0.5e-9;
    let t = charge_time_s(c_rate)?;
    Ok(r * r / (2.0 * d * t))
}

/// The note that goes with hopping-model numbers in the default (dilute-limit) settings.
pub const DILUTE_LIMIT_NOTE: &str = "Dilute limit: correlation factor f = 1 and site filling \
c = 0, i.e. a single carrier in an empty network; at high filling real diffusion is slower and \
correlated.";

/// The note that goes with Nernst-Einstein conductivities.
pub const HAVEN_RATIO_NOTE: &str = "Nernst-Einstein conductivity with the Haven ratio taken as \
1 (no correlated motion of the carriers).";

/// The caution that goes with every rate figure, in the words shown to users.
pub const RATE_CAUTION: &str = "Rate figures are upper bounds set by bulk diffusion in the \
active material alone; real electrodes are often limited first by the electrolyte, contacts and \
the counter electrode.";

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn zero_barrier_gives_the_prefactor() {
        let m = HoppingModel::new(0.0, 3.0, 1).unwrap();
        // (3e-10)^2 * 1e13 / 2 = 4.5e-7 m^2/s
        assert!((m.diffusion_coefficient(300.0) - 4.5e-7).abs() < 1e-20);
    }

    #[test]
    fn bad_parameters_are_refused() {
        assert!(HoppingModel::new(0.3, 3.0, 4).is_err());
        assert!(HoppingModel::new(-0.1, 3.0, 3).is_err());
        assert!(HoppingModel::new(0.3, 0.0, 3).is_err());
        let m = HoppingModel::new(0.3, 3.0, 3).unwrap();
        assert!(m.with_site_filling(1.0).is_err());
        assert!(m.with_correlation_factor(0.0).is_err());
        assert!(m.diffusion_coefficient(0.0).is_nan());
    }

    #[test]
    fn default_temperatures_include_room_temperature() {
        let t = default_temperatures_k();
        assert_eq!(t.len(), 8);
        assert!(t.contains(&298.15));
        assert!(t.windows(2).all(|w| w[0] < w[1]));
    }
}

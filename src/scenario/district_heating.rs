//! A synthetic district-heating demand scenario drawn from a known sparse Gaussian CRF.
//!
//! # The story
//!
//! A district-heating operator must commit production for tomorrow. At noon it forecasts the
//! heat demand of each of its `S` substations for each of the `H` hours of the next day
//! (default 16 × 24 = 384 outputs) from the next-day weather forecast, the calendar and each
//! substation's demand of the previous day. Under-forecasting is covered by reserve capacity,
//! and how much reserve is needed depends on how the forecast errors of different hours and
//! substations move *together*: errors that share a sign across a whole morning on one trunk
//! line add up, independent ones partly cancel. This scenario makes that joint error structure
//! known and sparse, so that the ability of an estimator to recover it can be measured.
//!
//! # Network layout
//!
//! * Substations `s = 0..S` hang off `T` trunk lines (default 4) that radiate from the plant;
//!   trunk `t(s) = ⌊s·T/S⌋` (contiguous blocks) and `pos(s)` is the position along the trunk
//!   (0 = closest to the plant).
//! * The city is cut into `Z` weather zones (default 4: coastal, city centre, suburbs,
//!   inland). Trunks cross zones as they leave the centre:
//!   `zone(s) = (t(s) + ⌊pos(s)/2⌋) mod Z`, so every trunk spans two zones and every zone is
//!   served by two trunks (default layout), which keeps weather and hydraulics from coinciding.
//! * Substation sizes (design load `P_s`: roughly the daily-mean demand of a −15 °C design
//!   day) are spread over 3–30 MW by a low-discrepancy sequence,
//!   `P_s = 3 MW · 10^{frac(½ + s·0.618034)}`; hourly demand reaches about 1.4·P_s on cold,
//!   windy weekday mornings and falls below 0.1·P_s on summer nights. Substations cycle
//!   through three consumer types (residential, commercial, mixed) by `s mod 3`. The layout
//!   does not depend on the seed: the seed drives the weather and the noise only, so every
//!   seed shares one true model.
//!
//! # Weather and calendar (the inputs)
//!
//! Days `d = 0..n` form years of 365 days (no leap days); day 0 is 1 January of year 0 and a
//! Monday. With the seasonal phase `c(doy) = cos(2π(doy − 20)/365)` (+1 on 20 January, the
//! climatological coldest day, −1 in mid-July), zone `z` and clock hour `k = 0..24`:
//!
//! * temperature `T = 7.5 °C + o_z − A_z·c(doy) + D(doy)·u(k + ½) + a(d,k) + b_z(d) + e_z(d,k)`:
//!   zone offsets `o_z` (+0.8, +1.2, 0, −1.2 °C) and seasonal amplitudes `A_z` (8.5, 10, 10,
//!   11.5 °C); an asymmetric daily cycle `u` (minimum −1 at 05:30, rising as a half cosine to
//!   +1 at 14:30, falling as a half cosine over the 15 h back to 05:30) whose half-range `D`
//!   is larger in summer and on clear days; a city-wide AR(1) day-to-day anomaly `a`
//!   (coefficient 0.85, stationary sd ≈ 4 °C in winter and ≈ 2 °C in summer) interpolated
//!   linearly through the day; a small zonal AR(1) day-to-day anomaly `b_z` (coefficient 0.6,
//!   stationary sd ≈ 0.6 °C); and a zonal hour-to-hour AR(1) fluctuation `e_z` (coefficient
//!   0.9, stationary sd 1 °C: fronts, showers);
//! * wind speed: a log-normal AR(1) process (coefficient 0.7), stronger in winter (mean about
//!   5.7 m/s in January and 3.3 m/s in July before the zone factor 0.8–1.3; coastal
//!   windiest), with a mild afternoon maximum;
//! * global horizontal irradiance from the solar elevation at 56° N,
//!   `sin e = sin φ sin δ + cos φ cos δ cos ω` with declination
//!   `δ = 23.44°·sin(2π(284 + doy)/365)` and hour angle `ω = 15°·(k + ½ − 12.7)` (solar noon
//!   at 12:42 clock time, a city west of its time zone's meridian), as
//!   `1 kW/m² · κ · max(0, sin e)^1.2`, where the clear-sky index `κ ∈ (0.15, 1)` is a
//!   logistic transform of a half-daily AR(1) cloudiness process (cloudier in winter), with
//!   separate morning (before 12:00) and afternoon values;
//! * daily mean relative humidity (as a fraction), higher in winter and on cloudy days;
//! * weekdays (0 = Monday) and a fixed set of public holidays per year
//!   (day-of-year 1, 6, 121, 156, 358, 359, 360, 365; no moving feasts).
//!
//! The simulated weather stands for the *forecast* the operator sees; the forecast error of
//! the weather, together with all behavioural randomness, is part of the CRF noise ε below.
//!
//! # The input vector x (p = 21·Z + 9 + S + 1; default p = 110)
//!
//! For each zone `z`, with clock blocks `b = 0..8` of three hours (00–03, …, 21–24):
//!
//! | inputs | count | unit |
//! |---|---|---|
//! | heating degrees `max(0, 18 °C − T)`, block mean | 8 | K |
//! | wind-weighted heating degrees `(v / 5 m/s)·max(0, 18 °C − T)`, block mean | 8 | K |
//! | irradiance, block mean, daylight blocks 06–18 only | 4 | kW/m² |
//! | daily mean relative humidity | 1 | fraction |
//!
//! then the calendar (Monday … Saturday indicators with Sunday as the baseline; `holiday` = 1
//! on a public holiday falling on Monday–Friday, since a holiday on a weekend changes nothing;
//! `season_cos` = `c(doy)` and `season_sin` = `sin(2π(doy − 20)/365)`), then each substation's
//! previous-day mean demand in MW (`lag`), and last a column of ones (the CRF has no
//! intercept). Night-time irradiance blocks are left out because they would be identically
//! zero columns.
//!
//! # The true model
//!
//! Outputs are ordered substation-major, `y[s·H + h]` = demand of substation `s` in hour `h`
//! (MW, hour `h` covering clock time `[24h/H, 24(h+1)/H)`). Conditionally on `x`,
//!
//! ```text
//! y | x ~ N(Bᵀx, Σ),   Σ = Λ⁻¹,   Θ = −BΛ,
//! ```
//!
//! which is exactly the crate's CRF `p(y | x) ∝ exp(−½ yᵀΛy − xᵀΘy)` with mean
//! `−Λ⁻¹Θᵀx = Λ⁻¹ΛBᵀx = Bᵀx` (Θᵀ = −ΛBᵀ as Λ is symmetric). Both B (the physically meaningful regression matrix) and Θ are
//! returned; Θ is sparse because B and Λ are (column `(s,h)` of Θ mixes the columns of B of the
//! graph neighbours of `(s,h)` only).
//!
//! ## Regression matrix B (p × q)
//!
//! Substation `s` of design load `P` and zone `z`, hour `h` at clock time `τ = 24(h + ½)/H`
//! in block `b(τ)`. Space-heating sensitivity `k = 0.75·P / 33 K` (75 % of the design load at
//! the −15 °C design temperature, 33 heating degrees); `π(τ)` is the consumer type's
//! space-heating profile (residential: night set-back and a morning peak around 07:00 plus a smaller evening peak;
//! commercial: a sharp 07:00 warm-up peak and a daytime plateau; mixed: their average) and
//! `w(τ)` the domestic hot-water profile (morning and evening peaks), both normalised to a
//! daily mean of 1. Persistence: the output responds to its *own* substation's lag with
//! coefficient `ρ` (default 0.15, building thermal mass and occupancy habits), and every other
//! (static) coefficient is multiplied by `1 − ρ`, so that the long-run level
//! `m = (1 − ρ)·static + ρ·m` equals the static level. Non-zero entries of column `(s,h)`:
//!
//! | input | coefficient |
//! |---|---|
//! | heating degrees, own zone, block `b(τ)` | `(1−ρ)·k·π(τ)·0.65` (1 if `b = 0`) |
//! | heating degrees, own zone, block `b(τ) − 1` | `(1−ρ)·k·π(τ)·0.35` (thermal lag) |
//! | wind-weighted heating degrees, own zone, block `b(τ)` | `(1−ρ)·0.15·k·π(τ)` (infiltration) |
//! | irradiance, own zone, block `b(τ)` (daylight) | `−(1−ρ)·0.05·P` per kW/m² (solar gains) |
//! | humidity, own zone | `(1−ρ)·1.5·k·π(τ)` |
//! | Monday–Friday | residential: `(1−ρ)·P·(0.06·g(τ;6,1) − 0.05·g(τ;9.5,1.2))` (earlier weekday morning peak); commercial: `(1−ρ)·0.10·P·g(τ;12,3.5)` (occupied offices); mixed: half of each |
//! | Saturday | commercial `(1−ρ)·0.03·P·g(τ;12,3.5)`, mixed half of it |
//! | holiday | minus the Monday–Friday coefficient (a holiday is a Sunday) |
//! | `season_cos` | `(1−ρ)·0.02·P·w(τ)` (colder mains water in winter) |
//! | own substation's lag | `ρ` |
//! | constant | `(1−ρ)·P·(0.08 + 0.10·w(τ))` (network heat losses + hot water) |
//!
//! where `g(τ; c, σ) = exp(−½ (d(τ,c)/σ)²)` with `d` the circular clock distance. Humidity of
//! other zones, `season_sin`, night-time blocks and the lags of other substations have zero
//! coefficients: they are available to an estimator but irrelevant. On the default network
//! the annual mean demand is about 0.48·P, mean winter (Dec–Feb) demand about three times the
//! mean summer (Jun–Aug) demand.
//!
//! ## Precision Λ (q × q)
//!
//! Forecast errors persist from hour to hour within a substation, and substations on one
//! trunk line share hydraulic conditions (supply temperature, pressure regime) and the local
//! mis-forecast of the weather. With the AR(1) precision (unit marginal variance)
//!
//! ```text
//! T_φ = 1/(1 − φ²) · tridiag(−φ; 1, 1 + φ², …, 1 + φ², 1)      (H × H, φ = 0.8)
//! ```
//!
//! and `G` the graph Laplacian of the trunk graph on substations (`G_ss` = number of other
//! substations on the trunk of `s`, `G_ss' = −1` for two substations on the same trunk), the
//! unit-scale precision is the Kronecker sum
//!
//! ```text
//! Λ₀ = I_S ⊗ T_φ + γ·(G ⊗ I_H)        (γ = 0.5),
//! ```
//!
//! positive definite by construction: `T_φ ≻ 0` (it is the inverse of the AR(1) correlation
//! matrix `φ^|i−j|`) and `G ⪰ 0`, so the eigenvalues of Λ₀ are `λ_i(T_φ) + γ·λ_j(G) > 0`.
//! Rescaling to the chosen marginal noise levels `σ_{s,h}` (a congruence, so Λ stays positive
//! definite and keeps its sparsity pattern),
//!
//! ```text
//! Λ = C Λ₀ C,   C = diag(√(Λ₀⁻¹)_ii / σ_i),   so that (Λ⁻¹)_ii = σ_i² exactly,
//! ```
//!
//! with `σ_{s,h} = noise_fraction · 0.42·P_s` (default 5 % of the substation's nominal annual
//! mean demand `0.42·P_s`, about 4.4 % of its realised mean). The edges of Λ are exactly: hours `h, h+1` of one substation and
//! the same hour of two substations on one trunk line; `S(H − 1) + H·Σ_t m_t(m_t − 1)/2` of
//! them (default 16·23 + 24·4·6 = 944 of 73 536 pairs). Partial correlations are about 0.37
//! (hour neighbours) and 0.08 (trunk neighbours), but the implied error *correlations* are
//! large: ≈ 0.64 between neighbouring hours, ≈ 0.49 between same-hour substations on one trunk
//! and ≈ 0.16 six hours apart. Errors on different trunks are independent. Positive
//! definiteness is also checked numerically by a Cholesky factorisation.
//!
//! ## Sampling
//!
//! With `Λ = L Lᵀ` (Cholesky), `ε = L⁻ᵀ z`, `z ~ N(0, I)` has covariance
//! `L⁻ᵀL⁻¹ = Λ⁻¹`. The noise of all days is drawn first; then days are simulated in order
//! because the lag input of day `d` is the simulated mean demand of day `d − 1` (day 0 uses a
//! seasonal default, the climatological demand of its substation).

use std::f64::consts::PI;
use std::ops::Range;

use ndarray::{s, Array1, Array2, ArrayView2};
use rand::rngs::StdRng;
use rand::SeedableRng;
use rand_distr::{Distribution, Normal};

use crate::error::{Error, Result};

/// Days per simulated year (leap days are not modelled).
pub const DAYS_PER_YEAR: usize = 365;

/// Public holidays, as one-based days of the year, repeated every year.
pub const HOLIDAYS: [u32; 8] = [1, 6, 121, 156, 358, 359, 360, 365];

/// Base temperature of the heating-degree transform, °C.
const BASE_TEMPERATURE: f64 = 18.0;
/// Heating degrees at the design temperature (−15 °C).
const DESIGN_HEATING_DEGREES: f64 = 33.0;
/// Reference wind speed of the wind-weighted heating degrees, m/s.
const WIND_REFERENCE: f64 = 5.0;
/// Clock time of solar noon, hours.
const SOLAR_NOON: f64 = 12.7;
/// Latitude of the synthetic city, degrees north.
const LATITUDE_DEG: f64 = 56.0;
/// Clock hours per feature block.
const BLOCK_HOURS: usize = 3;
/// Feature blocks per day.
const BLOCKS: usize = 24 / BLOCK_HOURS;
/// Daylight blocks that carry an irradiance feature (06–09, 09–12, 12–15, 15–18).
const SOLAR_BLOCKS: Range<usize> = 2..6;
/// Inputs per zone: heating degrees, wind-weighted heating degrees, irradiance, humidity.
const ZONE_INPUTS: usize = 2 * BLOCKS + (SOLAR_BLOCKS.end - SOLAR_BLOCKS.start) + 1;
/// Calendar inputs: Monday…Saturday, holiday, season_cos, season_sin.
const CALENDAR_INPUTS: usize = 9;
/// Nominal annual mean demand as a fraction of the design load (scale of the noise).
const NOMINAL_MEAN_FRACTION: f64 = 0.42;
/// Zone climates: (name, annual-mean offset °C, seasonal amplitude °C, wind factor).
const ZONE_CLIMATES: [(&str, f64, f64, f64); 4] = [
    ("coastal", 0.8, 8.5, 1.3),
    ("centre", 1.2, 10.0, 0.8),
    ("suburbs", 0.0, 10.0, 1.0),
    ("inland", -1.2, 11.5, 0.9),
];

/// Size and tuning of the district-heating scenario.
///
/// The defaults are the documented scenario; every field may be changed (the tests use a
/// smaller network and a longer history, for example).
#[derive(Debug, Clone, PartialEq)]
pub struct HeatingConfig {
    /// Number of substations `S` (default 16).
    pub substations: usize,
    /// Hours per day `H` in the output (default 24); hour `h` covers clock time
    /// `[24h/H, 24(h+1)/H)`.
    pub hours: usize,
    /// Number of simulated days `n` (default 6·365 = 2190).
    pub days: usize,
    /// Number of trunk lines `T` (default 4), `1 ≤ T ≤ S`.
    pub trunks: usize,
    /// Number of weather zones `Z` (default 4; climates repeat beyond 4).
    pub zones: usize,
    /// Seed of the weather and the noise (the network and the true model do not depend on it).
    pub seed: u64,
    /// Marginal noise sd as a fraction of each substation's nominal mean demand (default 0.05).
    pub noise_fraction: f64,
    /// Hour-to-hour AR(1) coefficient φ of the errors, `0 ≤ φ < 1` (default 0.8).
    pub hour_persistence: f64,
    /// Trunk coupling γ ≥ 0 of the errors (default 0.5).
    pub trunk_coupling: f64,
    /// Day-to-day demand persistence ρ, `0 ≤ ρ < 1` (default 0.15).
    pub lag_persistence: f64,
}

impl Default for HeatingConfig {
    fn default() -> Self {
        HeatingConfig {
            substations: 16,
            hours: 24,
            days: 6 * DAYS_PER_YEAR,
            trunks: 4,
            zones: 4,
            seed: 20_240_601,
            noise_fraction: 0.05,
            hour_persistence: 0.8,
            trunk_coupling: 0.5,
            lag_persistence: 0.15,
        }
    }
}

impl HeatingConfig {
    /// Number of inputs `p = 21·Z + 9 + S + 1`.
    pub fn num_inputs(&self) -> usize {
        ZONE_INPUTS * self.zones + CALENDAR_INPUTS + self.substations + 1
    }

    /// Number of outputs `q = S·H`.
    pub fn num_outputs(&self) -> usize {
        self.substations * self.hours
    }

    fn validate(&self) -> Result<()> {
        let bad = |msg: String| Err(Error::InvalidArgument(msg));
        for (name, v) in [
            ("substations", self.substations),
            ("hours", self.hours),
            ("days", self.days),
            ("trunks", self.trunks),
            ("zones", self.zones),
        ] {
            if v == 0 {
                return bad(format!("HeatingConfig::{name} must be at least 1"));
            }
        }
        if self.trunks > self.substations {
            return bad(format!(
                "HeatingConfig::trunks = {} exceeds substations = {}",
                self.trunks, self.substations
            ));
        }
        if !(self.noise_fraction.is_finite() && self.noise_fraction > 0.0) {
            return bad(format!(
                "HeatingConfig::noise_fraction = {} must be finite and > 0",
                self.noise_fraction
            ));
        }
        if !(0.0..1.0).contains(&self.hour_persistence) {
            return bad(format!(
                "HeatingConfig::hour_persistence = {} must lie in [0, 1)",
                self.hour_persistence
            ));
        }
        if !(self.trunk_coupling.is_finite() && self.trunk_coupling >= 0.0) {
            return bad(format!(
                "HeatingConfig::trunk_coupling = {} must be finite and >= 0",
                self.trunk_coupling
            ));
        }
        if !(0.0..1.0).contains(&self.lag_persistence) {
            return bad(format!(
                "HeatingConfig::lag_persistence = {} must lie in [0, 1)",
                self.lag_persistence
            ));
        }
        Ok(())
    }
}

/// Consecutive row ranges of a chronological train / validation / test split.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct YearSplit {
    /// Rows used for fitting.
    pub train: Range<usize>,
    /// Rows used for choosing tuning parameters.
    pub validation: Range<usize>,
    /// Rows held out for the final evaluation.
    pub test: Range<usize>,
}

/// One generated data set together with the true model that produced it.
#[derive(Debug, Clone, PartialEq)]
pub struct HeatingData {
    /// Inputs, n × p (one row per day; last column all ones).
    pub x: Array2<f64>,
    /// Outputs, n × q, MW; column `s·H + h` is substation `s`, hour `h`.
    pub y: Array2<f64>,
    /// Names of the p inputs, e.g. `z2_hdd_06_09`, `mon`, `lag_s07`, `const`.
    pub input_names: Vec<String>,
    /// Names of the q outputs, `s07_h18`.
    pub output_names: Vec<String>,
    /// Day of the year of each row, 1..=365.
    pub day_of_year: Vec<u32>,
    /// Simulated year of each row, from 0.
    pub year: Vec<u32>,
    /// Weekday of each row, 0 = Monday … 6 = Sunday.
    pub weekday: Vec<u32>,
    /// Whether each row is a public holiday (on any weekday).
    pub holiday: Vec<bool>,
    /// True precision Λ (q × q), sparse and positive definite.
    pub true_precision: Array2<f64>,
    /// True covariance Σ = Λ⁻¹ of the conditional noise (q × q).
    pub true_covariance: Array2<f64>,
    /// True interaction Θ = −BΛ (p × q) of the CRF.
    pub true_interaction: Array2<f64>,
    /// True regression matrix B (p × q): E[y | x] = Bᵀx.
    pub true_coefficients: Array2<f64>,
    /// Trunk line of each substation.
    pub trunk_of_substation: Vec<usize>,
    /// Weather zone of each substation.
    pub zone_of_substation: Vec<usize>,
    /// Design load P of each substation (about the daily-mean demand of a −15 °C day), MW.
    pub design_load_mw: Vec<f64>,
    /// Hours per day H (outputs per substation).
    pub hours: usize,
}

impl HeatingData {
    /// Number of days n.
    pub fn num_days(&self) -> usize {
        self.x.nrows()
    }

    /// Column of the output for substation `substation`, hour `hour`: `substation·H + hour`.
    pub fn output_index(&self, substation: usize, hour: usize) -> usize {
        substation * self.hours + hour
    }

    /// The true conditional mean `E[y | x] = Bᵀx = −Λ⁻¹Θᵀx` of every row (n × q).
    pub fn true_mean(&self) -> Array2<f64> {
        self.x.dot(&self.true_coefficients)
    }

    /// Inputs and outputs of a range of rows.
    pub fn rows(&self, rows: Range<usize>) -> (ArrayView2<'_, f64>, ArrayView2<'_, f64>) {
        (
            self.x.slice(s![rows.clone(), ..]),
            self.y.slice(s![rows, ..]),
        )
    }

    /// Chronological split by whole years: the first `train_years` years for training, the
    /// next `validation_years` for validation and all remaining days for testing. With the
    /// default six years, `split_by_year(4, 1)` gives train = years 0–3, validation = year 4,
    /// test = year 5.
    ///
    /// Errors with [`Error::InvalidArgument`] if any of the three parts would be empty.
    pub fn split_by_year(&self, train_years: usize, validation_years: usize) -> Result<YearSplit> {
        let n = self.num_days();
        let a = train_years.saturating_mul(DAYS_PER_YEAR);
        let b = a.saturating_add(validation_years.saturating_mul(DAYS_PER_YEAR));
        if a == 0 || b == a || b >= n {
            return Err(Error::InvalidArgument(format!(
                "split_by_year({train_years}, {validation_years}) leaves an empty part of {n} days \
                 ({DAYS_PER_YEAR} days per year)"
            )));
        }
        Ok(YearSplit {
            train: 0..a,
            validation: a..b,
            test: b..n,
        })
    }
}

/// Consumer type of a substation.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Kind {
    Residential,
    Commercial,
    Mixed,
}

/// Fixed description of one substation.
#[derive(Debug, Clone)]
struct Substation {
    trunk: usize,
    zone: usize,
    peak: f64,
    kind: Kind,
}

/// Gaussian bump on the 24-hour clock (circular distance).
fn bump(t: f64, centre: f64, width: f64) -> f64 {
    let mut d = (t - centre).rem_euclid(24.0);
    if d > 12.0 {
        d = 24.0 - d;
    }
    (-0.5 * (d / width).powi(2)).exp()
}

/// Seasonal phase `cos(2π(doy − 20)/365)`: +1 on the climatological coldest day.
fn coldness(doy: u32) -> f64 {
    (2.0 * PI * (doy as f64 - 20.0) / DAYS_PER_YEAR as f64).cos()
}

/// Daily profiles normalised to mean 1 over the 24 clock hours (sampled at half hours).
struct Profiles {
    residential_mean: f64,
    commercial_mean: f64,
    hot_water_mean: f64,
}

impl Profiles {
    fn raw_residential(t: f64) -> f64 {
        0.85 + 0.45 * bump(t, 7.0, 1.5) + 0.25 * bump(t, 19.0, 2.5)
    }
    fn raw_commercial(t: f64) -> f64 {
        0.75 + 0.55 * bump(t, 7.0, 1.2) + 0.35 * bump(t, 12.5, 3.5)
    }
    fn raw_hot_water(t: f64) -> f64 {
        0.6 + 0.8 * bump(t, 7.5, 1.5) + 0.6 * bump(t, 20.0, 2.0)
    }
    fn new() -> Self {
        let mean = |f: fn(f64) -> f64| (0..24).map(|k| f(k as f64 + 0.5)).sum::<f64>() / 24.0;
        Profiles {
            residential_mean: mean(Self::raw_residential),
            commercial_mean: mean(Self::raw_commercial),
            hot_water_mean: mean(Self::raw_hot_water),
        }
    }
    /// Space-heating profile π(τ) of a consumer type.
    fn heating(&self, kind: Kind, t: f64) -> f64 {
        let r = Self::raw_residential(t) / self.residential_mean;
        let c = Self::raw_commercial(t) / self.commercial_mean;
        match kind {
            Kind::Residential => r,
            Kind::Commercial => c,
            Kind::Mixed => 0.5 * (r + c),
        }
    }
    /// Hot-water profile w(τ).
    fn hot_water(&self, t: f64) -> f64 {
        Self::raw_hot_water(t) / self.hot_water_mean
    }
}

/// Index arithmetic of the input vector.
struct Layout {
    zones: usize,
    substations: usize,
}

impl Layout {
    fn hdd(&self, z: usize, b: usize) -> usize {
        z * ZONE_INPUTS + b
    }
    fn wind_hdd(&self, z: usize, b: usize) -> usize {
        z * ZONE_INPUTS + BLOCKS + b
    }
    /// Irradiance of a daylight block `b ∈ SOLAR_BLOCKS`.
    fn solar(&self, z: usize, b: usize) -> usize {
        z * ZONE_INPUTS + 2 * BLOCKS + (b - SOLAR_BLOCKS.start)
    }
    fn humidity(&self, z: usize) -> usize {
        z * ZONE_INPUTS + ZONE_INPUTS - 1
    }
    /// Calendar input `c`: 0..6 Monday…Saturday, 6 holiday, 7 season_cos, 8 season_sin.
    fn calendar(&self, c: usize) -> usize {
        self.zones * ZONE_INPUTS + c
    }
    fn lag(&self, s: usize) -> usize {
        self.zones * ZONE_INPUTS + CALENDAR_INPUTS + s
    }
    fn constant(&self) -> usize {
        self.lag(self.substations)
    }
    fn names(&self) -> Vec<String> {
        let mut names = Vec::with_capacity(self.constant() + 1);
        for z in 0..self.zones {
            for b in 0..BLOCKS {
                let (a, e) = (b * BLOCK_HOURS, (b + 1) * BLOCK_HOURS);
                names.push(format!("z{z}_hdd_{a:02}_{e:02}"));
            }
            for b in 0..BLOCKS {
                let (a, e) = (b * BLOCK_HOURS, (b + 1) * BLOCK_HOURS);
                names.push(format!("z{z}_windhdd_{a:02}_{e:02}"));
            }
            for b in SOLAR_BLOCKS {
                let (a, e) = (b * BLOCK_HOURS, (b + 1) * BLOCK_HOURS);
                names.push(format!("z{z}_solar_{a:02}_{e:02}"));
            }
            names.push(format!("z{z}_humidity"));
        }
        for c in [
            "mon",
            "tue",
            "wed",
            "thu",
            "fri",
            "sat",
            "holiday",
            "season_cos",
            "season_sin",
        ] {
            names.push(c.to_string());
        }
        for s in 0..self.substations {
            names.push(format!("lag_s{s:02}"));
        }
        names.push("const".to_string());
        names
    }
}

/// The fixed network: trunks, zones, sizes and consumer types.
fn network(config: &HeatingConfig) -> Vec<Substation> {
    let (n, t) = (config.substations, config.trunks);
    let golden = 0.618_033_988_749_894_9_f64;
    let mut first_on_trunk = vec![usize::MAX; t];
    (0..n)
        .map(|s| {
            let trunk = s * t / n;
            if first_on_trunk[trunk] == usize::MAX {
                first_on_trunk[trunk] = s;
            }
            let pos = s - first_on_trunk[trunk];
            let zone = (trunk + pos / 2) % config.zones;
            let frac = (0.5 + s as f64 * golden).fract();
            let kind = match s % 3 {
                0 => Kind::Residential,
                1 => Kind::Commercial,
                _ => Kind::Mixed,
            };
            Substation {
                trunk,
                zone,
                peak: 3.0 * 10f64.powf(frac),
                kind,
            }
        })
        .collect()
}

/// Clock time (hours) at the middle of output hour `h` of `hours`.
fn clock_time(h: usize, hours: usize) -> f64 {
    24.0 * (h as f64 + 0.5) / hours as f64
}

/// The regression matrix B (p × q) described in the module documentation.
fn coefficients(config: &HeatingConfig, net: &[Substation], layout: &Layout) -> Array2<f64> {
    let (p, hours) = (config.num_inputs(), config.hours);
    let mut b_mat = Array2::zeros((p, config.num_outputs()));
    let prof = Profiles::new();
    let rho = config.lag_persistence;
    let f = 1.0 - rho;
    for (s, sub) in net.iter().enumerate() {
        let peak = sub.peak;
        let k = 0.75 * peak / DESIGN_HEATING_DEGREES;
        let z = sub.zone;
        for h in 0..hours {
            let j = s * hours + h;
            let t = clock_time(h, hours);
            let blk = ((t / BLOCK_HOURS as f64) as usize).min(BLOCKS - 1);
            let pi = prof.heating(sub.kind, t);
            let w = prof.hot_water(t);
            let mut col = b_mat.column_mut(j);
            if blk == 0 {
                col[layout.hdd(z, blk)] = f * k * pi;
            } else {
                col[layout.hdd(z, blk)] = f * k * pi * 0.65;
                col[layout.hdd(z, blk - 1)] = f * k * pi * 0.35;
            }
            col[layout.wind_hdd(z, blk)] = f * 0.15 * k * pi;
            if SOLAR_BLOCKS.contains(&blk) {
                col[layout.solar(z, blk)] = -f * 0.05 * peak;
            }
            col[layout.humidity(z)] = f * 1.5 * k * pi;
            let residential_weekday = peak * (0.06 * bump(t, 6.0, 1.0) - 0.05 * bump(t, 9.5, 1.2));
            let commercial_weekday = 0.10 * peak * bump(t, 12.0, 3.5);
            let commercial_saturday = 0.03 * peak * bump(t, 12.0, 3.5);
            let (weekday, saturday) = match sub.kind {
                Kind::Residential => (residential_weekday, 0.0),
                Kind::Commercial => (commercial_weekday, commercial_saturday),
                Kind::Mixed => (
                    0.5 * (residential_weekday + commercial_weekday),
                    0.5 * commercial_saturday,
                ),
            };
            for c in 0..5 {
                col[layout.calendar(c)] = f * weekday;
            }
            col[layout.calendar(5)] = f * saturday;
            col[layout.calendar(6)] = -f * weekday;
            col[layout.calendar(7)] = f * 0.02 * peak * w;
            col[layout.lag(s)] = rho;
            col[layout.constant()] = f * peak * (0.08 + 0.10 * w);
        }
    }
    b_mat
}

/// Unit-scale precision Λ₀ = I_S ⊗ T_φ + γ·(G ⊗ I_H), G the trunk-graph Laplacian.
fn unit_precision(config: &HeatingConfig, net: &[Substation]) -> Array2<f64> {
    let (sn, hn) = (config.substations, config.hours);
    let phi = config.hour_persistence;
    let gamma = config.trunk_coupling;
    let scale = 1.0 / (1.0 - phi * phi);
    let mut lam = Array2::zeros((sn * hn, sn * hn));
    for s in 0..sn {
        let degree = net
            .iter()
            .enumerate()
            .filter(|(o, other)| *o != s && other.trunk == net[s].trunk)
            .count() as f64;
        for h in 0..hn {
            let i = s * hn + h;
            let ends = if hn == 1 {
                0.0
            } else if h == 0 || h == hn - 1 {
                1.0
            } else {
                2.0
            };
            // Diagonal of T_φ: 1/(1−φ²) at the ends, (1+φ²)/(1−φ²) inside; hn = 1 gives 1.
            let t_diag = if hn == 1 {
                1.0
            } else {
                scale * (1.0 + (ends - 1.0) * phi * phi)
            };
            lam[[i, i]] = t_diag + gamma * degree;
            if h + 1 < hn {
                lam[[i, i + 1]] = -phi * scale;
                lam[[i + 1, i]] = -phi * scale;
            }
            for (o, other) in net.iter().enumerate() {
                if o != s && other.trunk == net[s].trunk && gamma > 0.0 {
                    lam[[i, o * hn + h]] = -gamma;
                }
            }
        }
    }
    lam
}

/// Simulated weather: per zone, day and clock hour (temperature °C, wind m/s, irradiance
/// kW/m²) and per zone and day (relative humidity, fraction).
struct Weather {
    temperature: Vec<f64>,
    wind: Vec<f64>,
    solar: Vec<f64>,
    humidity: Vec<f64>,
}

impl Weather {
    /// Flat index of zone `z`, day `d`, clock hour `k` among `zones` zones.
    fn at(zones: usize, z: usize, d: usize, k: usize) -> usize {
        (d * zones + z) * 24 + k
    }
}

/// Asymmetric daily temperature cycle u(t) ∈ [−1, 1] at clock time t (hours): minimum at
/// 05:30, a half cosine up to the maximum at 14:30, a slower half cosine down over 15 hours.
fn diurnal_shape(t: f64) -> f64 {
    let since_min = (t - 5.5).rem_euclid(24.0);
    if since_min <= 9.0 {
        -(PI * since_min / 9.0).cos()
    } else {
        (PI * (since_min - 9.0) / 15.0).cos()
    }
}

fn simulate_weather(config: &HeatingConfig, rng: &mut StdRng) -> Weather {
    let (nz, nd) = (config.zones, config.days);
    let normal = Normal::new(0.0, 1.0).expect("unit normal");
    let mut gauss = || -> f64 { normal.sample(&mut *rng) };
    let doy = |d: usize| (d % DAYS_PER_YEAR) as u32 + 1;

    // City-wide temperature anomaly a_d for d = 0..=n (one extra day for interpolation).
    let a_phi: f64 = 0.85;
    let a_innov = |d: usize| 1.6 * (1.0 + 0.35 * coldness(doy(d)));
    let mut anomaly = Vec::with_capacity(nd + 1);
    anomaly.push(a_innov(0) / (1.0 - a_phi * a_phi).sqrt() * gauss());
    for d in 1..=nd {
        let prev = anomaly[d - 1];
        anomaly.push(a_phi * prev + a_innov(d) * gauss());
    }
    // Zonal anomalies, wind and cloudiness states.
    let b_phi: f64 = 0.6;
    let b_innov = 0.5;
    let mut zonal: Vec<f64> = (0..nz)
        .map(|_| b_innov / (1.0 - b_phi * b_phi).sqrt() * gauss())
        .collect();
    // Hour-to-hour zonal fluctuation (fronts, showers): AR(1) in hours, stationary sd 1 °C.
    let e_phi: f64 = 0.9;
    let e_innov = (1.0 - e_phi * e_phi).sqrt();
    let mut hourly: Vec<f64> = (0..nz).map(|_| gauss()).collect();
    let w_phi: f64 = 0.7;
    let mut wind_state = gauss();
    // Cloudiness advances in half-day steps: [morning, afternoon].
    let g_phi: f64 = 0.6;
    let mut cloud_state = [0.0, gauss()];

    let mut w = Weather {
        temperature: vec![0.0; nz * nd * 24],
        wind: vec![0.0; nz * nd * 24],
        solar: vec![0.0; nz * nd * 24],
        humidity: vec![0.0; nz * nd],
    };
    let lat = LATITUDE_DEG.to_radians();
    for d in 0..nd {
        let dy = doy(d);
        let cold = coldness(dy);
        if d > 0 {
            for b in zonal.iter_mut() {
                *b = b_phi * *b + b_innov * gauss();
            }
            wind_state = w_phi * wind_state + (1.0 - w_phi * w_phi).sqrt() * gauss();
        }
        let g_innov = (1.0 - g_phi * g_phi).sqrt();
        cloud_state[0] = g_phi * cloud_state[1] + g_innov * gauss();
        cloud_state[1] = g_phi * cloud_state[0] + g_innov * gauss();
        let decl = (23.44f64).to_radians() * (2.0 * PI * (284.0 + dy as f64) / 365.0).sin();
        for (z, (zonal_anomaly, fluctuation)) in zonal.iter().zip(hourly.iter_mut()).enumerate() {
            let (_, offset, amplitude, wind_factor) = ZONE_CLIMATES[z % ZONE_CLIMATES.len()];
            let zone_wind = 0.85 * wind_state + 0.5 * gauss();
            let clear_of = |state: f64, noise: f64| {
                0.15 + 0.85 / (1.0 + (-(1.1 * state + 0.5 * noise - 0.4 * cold)).exp())
            };
            let clear_half = [
                clear_of(cloud_state[0], gauss()),
                clear_of(cloud_state[1], gauss()),
            ];
            let clear = 0.5 * (clear_half[0] + clear_half[1]);
            let rh = (0.78 + 0.08 * cold + 0.15 * (0.55 - clear) + 0.04 * gauss()).clamp(0.3, 1.0);
            w.humidity[d * nz + z] = rh;
            let seasonal = 7.5 + offset - amplitude * cold;
            let diurnal_range = (3.0 - 1.0 * cold) * (0.4 + 0.8 * clear);
            let mean_wind = wind_factor * (4.5 + 1.2 * cold) * (0.35 * zone_wind - 0.06).exp();
            for k in 0..24 {
                let t = k as f64 + 0.5;
                let frac = t / 24.0;
                let anom = anomaly[d] + (anomaly[d + 1] - anomaly[d]) * frac;
                let idx = Weather::at(nz, z, d, k);
                *fluctuation = e_phi * *fluctuation + e_innov * gauss();
                w.temperature[idx] = seasonal
                    + *fluctuation
                    + diurnal_range * diurnal_shape(t)
                    + anom
                    + zonal_anomaly;
                w.wind[idx] = mean_wind * (1.0 + 0.2 * (2.0 * PI * (t - 15.0) / 24.0).cos());
                let omega = (15.0 * (t - SOLAR_NOON)).to_radians();
                let sin_e = lat.sin() * decl.sin() + lat.cos() * decl.cos() * omega.cos();
                w.solar[idx] = clear_half[k / 12] * sin_e.max(0.0).powf(1.2);
            }
        }
    }
    w
}

/// Day-of-year, year, weekday and holiday flag of day `d`.
fn calendar_of(d: usize) -> (u32, u32, u32, bool) {
    let doy = (d % DAYS_PER_YEAR) as u32 + 1;
    let year = (d / DAYS_PER_YEAR) as u32;
    let weekday = (d % 7) as u32;
    (doy, year, weekday, HOLIDAYS.contains(&doy))
}

/// Fills the weather and calendar inputs of every day (lags and constant are left to the
/// sequential simulation).
fn exogenous_inputs(config: &HeatingConfig, layout: &Layout, weather: &Weather) -> Array2<f64> {
    let (nz, nd) = (config.zones, config.days);
    let mut x = Array2::zeros((nd, config.num_inputs()));
    for d in 0..nd {
        let mut row = x.row_mut(d);
        for z in 0..nz {
            for b in 0..BLOCKS {
                let (mut hdd, mut whdd, mut sol) = (0.0, 0.0, 0.0);
                for k in b * BLOCK_HOURS..(b + 1) * BLOCK_HOURS {
                    let idx = Weather::at(nz, z, d, k);
                    let deg = (BASE_TEMPERATURE - weather.temperature[idx]).max(0.0);
                    hdd += deg;
                    whdd += weather.wind[idx] / WIND_REFERENCE * deg;
                    sol += weather.solar[idx];
                }
                let m = BLOCK_HOURS as f64;
                row[layout.hdd(z, b)] = hdd / m;
                row[layout.wind_hdd(z, b)] = whdd / m;
                if SOLAR_BLOCKS.contains(&b) {
                    row[layout.solar(z, b)] = sol / m;
                }
            }
            row[layout.humidity(z)] = weather.humidity[d * nz + z];
        }
        let (doy, _, weekday, holiday) = calendar_of(d);
        if weekday < 6 {
            row[layout.calendar(weekday as usize)] = 1.0;
        }
        if holiday && weekday < 5 {
            row[layout.calendar(6)] = 1.0;
        }
        row[layout.calendar(7)] = coldness(doy);
        row[layout.calendar(8)] = (2.0 * PI * (doy as f64 - 20.0) / DAYS_PER_YEAR as f64).sin();
        row[layout.constant()] = 1.0;
    }
    x
}

/// Draws `days` independent noise vectors ε ~ N(0, Λ⁻¹) as ε = L⁻ᵀz, given the lower
/// Cholesky factor L of Λ. Uses the envelope of Lᵀ (zero tail of each row) to skip work.
fn draw_noise(lower: ArrayView2<'_, f64>, days: usize, rng: &mut StdRng) -> Array2<f64> {
    let q = lower.nrows();
    // U = Lᵀ in row-major order, so row i of U (column i of L) is contiguous.
    let upper = lower.t().as_standard_layout().into_owned();
    let row_end: Vec<usize> = (0..q)
        .map(|i| {
            (i..q)
                .rev()
                .find(|&k| upper[[i, k]] != 0.0)
                .map_or(i + 1, |k| k + 1)
        })
        .collect();
    let normal = Normal::new(0.0, 1.0).expect("unit normal");
    let mut eps = Array2::zeros((days, q));
    let mut z = vec![0.0; q];
    for d in 0..days {
        for v in z.iter_mut() {
            *v = normal.sample(rng);
        }
        let mut e = eps.row_mut(d);
        // Back substitution for U e = z, from the last coordinate up.
        for i in (0..q).rev() {
            let u = upper.row(i);
            let mut acc = z[i];
            for k in i + 1..row_end[i] {
                acc -= u[k] * e[k];
            }
            e[i] = acc / u[i];
        }
    }
    eps
}

/// Generates the district-heating data set described in the module documentation.
///
/// Deterministic for a given configuration (bit-identical across runs on one platform).
/// Errors with [`Error::InvalidArgument`] on zero sizes or out-of-range tuning values.
pub fn generate(config: &HeatingConfig) -> Result<HeatingData> {
    config.validate()?;
    let net = network(config);
    let layout = Layout {
        zones: config.zones,
        substations: config.substations,
    };
    let (hn, sn, nd) = (config.hours, config.substations, config.days);
    let q = config.num_outputs();

    // True model.
    let b_mat = coefficients(config, &net, &layout);
    let lam0 = unit_precision(config, &net);
    let chol0 = crate::linalg::cholesky(lam0.view()).ok_or_else(|| {
        Error::Numerical("unit-scale precision of the heating scenario is not PD".into())
    })?;
    let sigma0 = chol0.inverse();
    let sd: Vec<f64> = net
        .iter()
        .flat_map(|sub| {
            std::iter::repeat_n(config.noise_fraction * NOMINAL_MEAN_FRACTION * sub.peak, hn)
        })
        .collect();
    let c: Array1<f64> = (0..q).map(|i| sigma0[[i, i]].sqrt() / sd[i]).collect();
    let mut lam = Array2::zeros((q, q));
    let mut sigma = Array2::zeros((q, q));
    for i in 0..q {
        for j in i..q {
            // Computed once per pair and mirrored, so both matrices are exactly symmetric.
            let (l, v) = (c[i] * lam0[[i, j]] * c[j], sigma0[[i, j]] / (c[i] * c[j]));
            lam[[i, j]] = l;
            lam[[j, i]] = l;
            sigma[[i, j]] = v;
            sigma[[j, i]] = v;
        }
    }
    let chol = crate::linalg::cholesky(lam.view())
        .ok_or_else(|| Error::NotPositiveDefinite("precision of the heating scenario".into()))?;
    let mut theta = b_mat.dot(&lam);
    theta.mapv_inplace(|v| if v == 0.0 { 0.0 } else { -v });

    // Inputs, noise, then the sequential simulation of the lagged demand.
    let mut rng = StdRng::seed_from_u64(config.seed);
    let weather = simulate_weather(config, &mut rng);
    let mut x = exogenous_inputs(config, &layout, &weather);
    let eps = draw_noise(chol.lower().view(), nd, &mut rng);

    // The exogenous part of the mean in one matrix product (the lag columns are still zero),
    // y = X_exo B + ε; then each day adds its lag term, which needs the previous day's y.
    // Only lag(s) → outputs of substation s is non-zero in B, so that row segment suffices.
    let mut y = x.dot(&b_mat);
    y += &eps;
    for d in 0..nd {
        for (s, sub) in net.iter().enumerate() {
            let cols = s * hn..(s + 1) * hn;
            let lag = if d == 0 {
                // Seasonal default: climatological demand of 31 December.
                let (_, offset, amplitude, _) = ZONE_CLIMATES[sub.zone % ZONE_CLIMATES.len()];
                let t_clim = 7.5 + offset - amplitude * coldness(DAYS_PER_YEAR as u32);
                let k = 0.75 * sub.peak / DESIGN_HEATING_DEGREES;
                0.18 * sub.peak + k * (BASE_TEMPERATURE - t_clim).max(0.0)
            } else {
                y.slice(s![d - 1, cols.clone()]).sum() / hn as f64
            };
            let j = layout.lag(s);
            x[[d, j]] = lag;
            let coef = b_mat.slice(s![j, cols.clone()]);
            let mut out = y.slice_mut(s![d, cols]);
            out.scaled_add(lag, &coef);
        }
    }

    let mut day_of_year = Vec::with_capacity(nd);
    let mut year = Vec::with_capacity(nd);
    let mut weekday = Vec::with_capacity(nd);
    let mut holiday = Vec::with_capacity(nd);
    for d in 0..nd {
        let (a, b, c, h) = calendar_of(d);
        day_of_year.push(a);
        year.push(b);
        weekday.push(c);
        holiday.push(h);
    }
    let output_names = (0..sn)
        .flat_map(|s| (0..hn).map(move |h| format!("s{s:02}_h{h:02}")))
        .collect();

    Ok(HeatingData {
        x,
        y,
        input_names: layout.names(),
        output_names,
        day_of_year,
        year,
        weekday,
        holiday,
        true_precision: lam,
        true_covariance: sigma,
        true_interaction: theta,
        true_coefficients: b_mat,
        trunk_of_substation: net.iter().map(|s| s.trunk).collect(),
        zone_of_substation: net.iter().map(|s| s.zone).collect(),
        design_load_mw: net.iter().map(|s| s.peak).collect(),
        hours: hn,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A smaller network with a long history, for Monte Carlo checks: 8 substations on
    /// 2 trunks, 12 two-hour outputs (q = 96), 20 000 days.
    fn mc_config() -> HeatingConfig {
        HeatingConfig {
            substations: 8,
            hours: 12,
            trunks: 2,
            zones: 3,
            days: 20_000,
            seed: 7,
            ..HeatingConfig::default()
        }
    }

    fn default_data() -> HeatingData {
        generate(&HeatingConfig::default()).unwrap()
    }

    fn bits(a: &Array2<f64>) -> Vec<u64> {
        a.iter().map(|v| v.to_bits()).collect()
    }

    #[test]
    fn deterministic_for_a_fixed_seed() {
        let cfg = HeatingConfig {
            days: 400,
            ..HeatingConfig::default()
        };
        let a = generate(&cfg).unwrap();
        let b = generate(&cfg).unwrap();
        assert_eq!(bits(&a.x), bits(&b.x));
        assert_eq!(bits(&a.y), bits(&b.y));
        assert_eq!(bits(&a.true_precision), bits(&b.true_precision));
        assert_eq!(bits(&a.true_interaction), bits(&b.true_interaction));
        let c = generate(&HeatingConfig { seed: 99, ..cfg }).unwrap();
        assert_ne!(bits(&a.y), bits(&c.y));
        // The true model does not depend on the seed.
        assert_eq!(bits(&a.true_precision), bits(&c.true_precision));
        assert_eq!(bits(&a.true_coefficients), bits(&c.true_coefficients));
    }

    #[test]
    fn shapes_names_and_calendar() {
        let cfg = HeatingConfig::default();
        let d = default_data();
        let (n, p, q) = (2190, cfg.num_inputs(), 384);
        assert!((100..=150).contains(&p), "p = {p}");
        assert_eq!(d.x.dim(), (n, p));
        assert_eq!(d.y.dim(), (n, q));
        assert_eq!(d.input_names.len(), p);
        assert_eq!(d.output_names.len(), q);
        assert_eq!(d.true_precision.dim(), (q, q));
        assert_eq!(d.true_covariance.dim(), (q, q));
        assert_eq!(d.true_interaction.dim(), (p, q));
        assert_eq!(d.true_coefficients.dim(), (p, q));
        assert_eq!(d.trunk_of_substation.len(), 16);
        assert_eq!(d.output_names[d.output_index(3, 7)], "s03_h07");
        assert_eq!(d.input_names[p - 1], "const");
        assert!(d.x.column(p - 1).iter().all(|&v| v == 1.0));
        // No identically zero input column, all inputs finite.
        for j in 0..p {
            assert!(
                d.x.column(j).iter().any(|&v| v != 0.0),
                "{}",
                d.input_names[j]
            );
        }
        assert!(d.x.iter().chain(d.y.iter()).all(|v| v.is_finite()));
        assert_eq!((d.day_of_year[0], d.year[0], d.weekday[0]), (1, 0, 0));
        assert_eq!((d.day_of_year[n - 1], d.year[n - 1]), (365, 5));
        assert_eq!(d.holiday.iter().filter(|&&h| h).count(), 6 * HOLIDAYS.len());
        let split = d.split_by_year(4, 1).unwrap();
        assert_eq!(split.train, 0..1460);
        assert_eq!(split.validation, 1460..1825);
        assert_eq!(split.test, 1825..2190);
        assert!(d.split_by_year(5, 1).is_err());
        assert!(d.split_by_year(0, 1).is_err());
        let (xs, ys) = d.rows(split.test.clone());
        assert_eq!((xs.nrows(), ys.nrows()), (365, 365));
    }

    #[test]
    fn invalid_configurations_are_rejected() {
        let base = HeatingConfig::default();
        for cfg in [
            HeatingConfig {
                substations: 0,
                ..base.clone()
            },
            HeatingConfig {
                hours: 0,
                ..base.clone()
            },
            HeatingConfig {
                days: 0,
                ..base.clone()
            },
            HeatingConfig {
                trunks: 0,
                ..base.clone()
            },
            HeatingConfig {
                zones: 0,
                ..base.clone()
            },
            HeatingConfig {
                trunks: 17,
                ..base.clone()
            },
            HeatingConfig {
                noise_fraction: 0.0,
                ..base.clone()
            },
            HeatingConfig {
                hour_persistence: 1.0,
                ..base.clone()
            },
            HeatingConfig {
                lag_persistence: f64::NAN,
                ..base.clone()
            },
        ] {
            assert!(matches!(generate(&cfg), Err(Error::InvalidArgument(_))));
        }
        // Degenerate but valid sizes work.
        let tiny = HeatingConfig {
            substations: 1,
            hours: 1,
            trunks: 1,
            zones: 1,
            days: 3,
            ..base
        };
        let d = generate(&tiny).unwrap();
        assert_eq!(d.y.dim(), (3, 1));
    }

    #[test]
    fn precision_is_symmetric_positive_definite_and_inverts_the_covariance() {
        let d = default_data();
        let lam = &d.true_precision;
        let q = lam.nrows();
        for i in 0..q {
            for j in 0..q {
                assert_eq!(lam[[i, j]], lam[[j, i]]);
            }
        }
        assert!(crate::linalg::cholesky(lam.view()).is_some());
        let prod = lam.dot(&d.true_covariance);
        for i in 0..q {
            for j in 0..q {
                let target = if i == j { 1.0 } else { 0.0 };
                assert!((prod[[i, j]] - target).abs() < 1e-9, "({i},{j})");
            }
        }
        // Θ = −BΛ, so the CRF mean −Λ⁻¹Θᵀx equals Bᵀx.
        let theta = -d.true_coefficients.dot(lam);
        assert!((&theta - &d.true_interaction)
            .iter()
            .all(|v| v.abs() < 1e-12));
        for row in [0, 500, 2000] {
            let x = d.x.row(row);
            let crf_mean = -d.true_covariance.dot(&d.true_interaction.t().dot(&x));
            let reg_mean = d.true_coefficients.t().dot(&x);
            for (a, b) in crf_mean.iter().zip(reg_mean.iter()) {
                assert!((a - b).abs() < 1e-8 * (1.0 + b.abs()));
            }
        }
    }

    #[test]
    fn sparsity_pattern_is_hour_chains_plus_trunk_cliques() {
        let d = default_data();
        let (sn, hn) = (16, 24);
        let lam = &d.true_precision;
        let mut edges = 0;
        for s in 0..sn {
            for h in 0..hn {
                let i = d.output_index(s, h);
                assert!(lam[[i, i]] > 0.0);
                for s2 in 0..sn {
                    for h2 in 0..hn {
                        let j = d.output_index(s2, h2);
                        if j <= i {
                            continue;
                        }
                        let hour_edge = s == s2 && h.abs_diff(h2) == 1;
                        let trunk_edge = s != s2
                            && h == h2
                            && d.trunk_of_substation[s] == d.trunk_of_substation[s2];
                        let expected = hour_edge || trunk_edge;
                        assert_eq!(lam[[i, j]] != 0.0, expected, "({s},{h})-({s2},{h2})");
                        if expected {
                            assert!(lam[[i, j]] < 0.0, "positive partial correlation");
                            edges += 1;
                        }
                    }
                }
            }
        }
        assert_eq!(edges, 16 * 23 + 24 * 4 * 6);
        // B: each output uses only its own zone's weather and its own lag.
        let b = &d.true_coefficients;
        for s in 0..sn {
            for h in 0..hn {
                let col = b.column(d.output_index(s, h));
                for (j, name) in d.input_names.iter().enumerate() {
                    let own_zone = name.starts_with(&format!("z{}_", d.zone_of_substation[s]));
                    let is_zone = name.starts_with('z');
                    let is_lag = name.starts_with("lag_");
                    if (is_zone && !own_zone) || (is_lag && *name != format!("lag_s{s:02}")) {
                        assert_eq!(col[j], 0.0, "{name} in column ({s},{h})");
                    }
                    if name == "season_sin" {
                        assert_eq!(col[j], 0.0);
                    }
                }
                let nnz = col.iter().filter(|v| **v != 0.0).count();
                assert!((10..=16).contains(&nnz), "B column ({s},{h}) has {nnz}");
            }
        }
    }

    #[test]
    fn residual_covariance_matches_the_true_covariance() {
        // With known zero mean, the sample covariance ĉ_ij = (1/n) Σ r_i r_j has
        // sd(ĉ_ij) = √((σ_ii σ_jj + σ_ij²)/n) for Gaussian r; at n = 20 000 that is ≈ 1 % of
        // √(σ_ii σ_jj). We test 4.5 sd on a dozen entries (chance of a false alarm for an
        // arbitrary seed ≈ 1e-4; the seed is fixed, so the test is deterministic).
        let d = generate(&mc_config()).unwrap();
        let r = &d.y - &d.true_mean();
        let n = r.nrows() as f64;
        let sig = &d.true_covariance;
        let hn = d.hours;
        let o = |s, h| d.output_index(s, h);
        let pairs = [
            (o(0, 0), o(0, 0)),
            (o(5, 7), o(5, 7)),
            (o(2, 3), o(2, 4)),
            (o(2, 3), o(2, 5)),
            (o(2, 3), o(2, 9)),
            (o(0, 6), o(1, 6)),
            (o(0, 6), o(3, 6)),
            (o(4, 2), o(6, 3)),
            (o(0, 0), o(0, hn - 1)),
            (o(1, 5), o(5, 5)), // different trunks: independent
            (o(3, 0), o(7, 11)),
            (o(6, 11), o(7, 10)),
        ];
        assert_ne!(d.trunk_of_substation[1], d.trunk_of_substation[5]);
        assert_eq!(sig[[o(1, 5), o(5, 5)]], 0.0);
        for (i, j) in pairs {
            let emp = r.column(i).dot(&r.column(j)) / n;
            let sd = ((sig[[i, i]] * sig[[j, j]] + sig[[i, j]].powi(2)) / n).sqrt();
            assert!(
                (emp - sig[[i, j]]).abs() < 4.5 * sd,
                "({i},{j}): empirical {emp}, true {}, sd {sd}",
                sig[[i, j]]
            );
        }
        // The correlations are substantial where designed.
        let corr = |i: usize, j: usize| sig[[i, j]] / (sig[[i, i]] * sig[[j, j]]).sqrt();
        assert!(corr(o(2, 3), o(2, 4)) > 0.5);
        assert!(corr(o(0, 6), o(1, 6)) > 0.3);
    }

    #[test]
    fn demand_is_physically_plausible() {
        let d = default_data();
        let (sn, hn) = (16, 24);
        assert!(
            d.y.iter().all(|&v| v > 0.0),
            "min {}",
            d.y.fold(f64::INFINITY, |a, &b| a.min(b))
        );
        assert!(d.design_load_mw.iter().all(|&p| (3.0..=30.0).contains(&p)));
        assert!(d.y.iter().all(|&v| v < 45.0));
        let winter: Vec<usize> = (0..d.num_days())
            .filter(|&i| d.day_of_year[i] <= 59 || d.day_of_year[i] > 334)
            .collect();
        let summer: Vec<usize> = (0..d.num_days())
            .filter(|&i| (152..=243).contains(&d.day_of_year[i]))
            .collect();
        let resid = &d.y - &d.true_mean();
        for s in 0..sn {
            let cols = s * hn..(s + 1) * hn;
            let block = d.y.slice(s![.., cols.clone()]);
            let load = d.design_load_mw[s];
            let max = block.fold(0.0f64, |a, &b| a.max(b));
            assert!(
                max < 1.6 * load && max > 0.8 * load,
                "s{s}: max {max}, P {load}"
            );
            let mean_over = |days: &[usize]| {
                days.iter()
                    .map(|&i| block.row(i).sum() / hn as f64)
                    .sum::<f64>()
                    / days.len() as f64
            };
            let (w, su) = (mean_over(&winter), mean_over(&summer));
            assert!(w > 2.0 * su, "s{s}: winter {w} summer {su}");
            // Noise: 3–8 % of the substation's mean demand.
            let mean = block.mean().unwrap();
            assert!(
                mean > 0.3 * load && mean < 0.6 * load,
                "s{s}: mean {mean}, P {load}"
            );
            let rs = resid.slice(s![.., cols]);
            let sd = (rs.mapv(|v| v * v).sum() / rs.len() as f64).sqrt();
            assert!(
                (0.03..=0.08).contains(&(sd / mean)),
                "s{s}: noise sd {sd}, mean {mean}"
            );
            // Residential substations: a morning peak above the night in winter.
            if s % 3 == 0 {
                let at = |h: usize| winter.iter().map(|&i| block[[i, h]]).sum::<f64>();
                assert!(at(7) > 1.2 * at(2), "s{s}");
            }
        }
    }
}

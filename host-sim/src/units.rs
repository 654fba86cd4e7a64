//! SI values written as strings with their unit: `"40 mH"`, `"18 Ω"`, `"18 ohm"`, `"50 us"`,
//! `"50 µs"`, `"470 pF"`, `"0.75 V"`, `"25 °C"`, `"60 %"`, and spreads such as `"±20 %"` or
//! `"±0.5 V"`.
//!
//! A value without its unit is refused: a bare 36 could be volts or millivolts. The space between
//! number and unit is optional; prefixes p n u µ m k M G apply to every unit but temperatures and
//! percentages.

use core::fmt;

/// The quantity a value must be.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Unit {
    /// Henry.
    Henry,
    /// Ohm (`Ω`, `ohm`).
    Ohm,
    /// Second.
    Second,
    /// Farad.
    Farad,
    /// Volt.
    Volt,
    /// Ampere.
    Ampere,
    /// Joule.
    Joule,
    /// Watt.
    Watt,
    /// Degree Celsius (`°C`, `degC`).
    Celsius,
    /// Kelvin, as a temperature difference.
    Kelvin,
    /// Kelvin per watt (thermal resistance).
    KelvinPerWatt,
    /// Per kelvin (temperature coefficient): `/K`, `1/K`, or `%/K`.
    PerKelvin,
    /// A fraction written in percent.
    Percent,
    /// Hertz.
    Hertz,
    /// Volt-second per radian (a motor's back-EMF constant): `V·s/rad`, `V*s/rad`, `Vs/rad`.
    VoltSecondPerRadian,
    /// Kilogram square metre (inertia): `kg·m²`, `kg*m^2`, `kgm2`. No prefix.
    KilogramSquareMetre,
    /// Newton metre second (viscous friction): `N·m·s`, `N*m*s`, `Nms`.
    NewtonMetreSecond,
}

impl Unit {
    /// How the unit is written in messages.
    pub const fn symbol(self) -> &'static str {
        match self {
            Unit::Henry => "H",
            Unit::Ohm => "Ω",
            Unit::Second => "s",
            Unit::Farad => "F",
            Unit::Volt => "V",
            Unit::Ampere => "A",
            Unit::Joule => "J",
            Unit::Watt => "W",
            Unit::Celsius => "°C",
            Unit::Kelvin => "K",
            Unit::KelvinPerWatt => "K/W",
            Unit::PerKelvin => "/K",
            Unit::Percent => "%",
            Unit::Hertz => "Hz",
            Unit::VoltSecondPerRadian => "V·s/rad",
            Unit::KilogramSquareMetre => "kg·m²",
            Unit::NewtonMetreSecond => "N·m·s",
        }
    }

    /// An example value, for messages.
    pub const fn example(self) -> &'static str {
        match self {
            Unit::Henry => "\"40 mH\"",
            Unit::Ohm => "\"18 Ω\" or \"18 ohm\"",
            Unit::Second => "\"50 us\"",
            Unit::Farad => "\"470 pF\"",
            Unit::Volt => "\"24 V\"",
            Unit::Ampere => "\"1.2 A\"",
            Unit::Joule => "\"50 mJ\"",
            Unit::Watt => "\"2 W\"",
            Unit::Celsius => "\"25 °C\"",
            Unit::Kelvin => "\"10 K\"",
            Unit::KelvinPerWatt => "\"2 K/W\"",
            Unit::PerKelvin => "\"0.393 %/K\" or \"0.00393 /K\"",
            Unit::Percent => "\"60 %\"",
            Unit::Hertz => "\"100 Hz\"",
            Unit::VoltSecondPerRadian => "\"12 mV·s/rad\"",
            Unit::KilogramSquareMetre => "\"4e-6 kg·m²\"",
            Unit::NewtonMetreSecond => "\"2 µN·m·s\"",
        }
    }

    fn spellings(self) -> &'static [&'static str] {
        match self {
            Unit::Henry => &["H"],
            Unit::Ohm => &["\u{3a9}", "\u{2126}", "ohm", "ohms", "Ohm"],
            Unit::Second => &["s"],
            Unit::Farad => &["F"],
            Unit::Volt => &["V"],
            Unit::Ampere => &["A"],
            Unit::Joule => &["J"],
            Unit::Watt => &["W"],
            Unit::Celsius => &["°C", "degC", "℃"],
            Unit::Kelvin => &["K"],
            Unit::KelvinPerWatt => &["K/W"],
            Unit::PerKelvin => &["/K", "1/K"],
            Unit::Percent => &["%"],
            Unit::Hertz => &["Hz"],
            Unit::VoltSecondPerRadian => &["V·s/rad", "V*s/rad", "Vs/rad", "V s/rad"],
            Unit::KilogramSquareMetre => &["kg·m²", "kg*m^2", "kg m^2", "kgm2", "kg·m^2"],
            Unit::NewtonMetreSecond => &["N·m·s", "N*m*s", "Nms", "N m s"],
        }
    }

    const fn takes_prefix(self) -> bool {
        !matches!(
            self,
            Unit::Celsius | Unit::Percent | Unit::PerKelvin | Unit::KilogramSquareMetre
        )
    }
}

/// Why a value string was refused.
#[derive(Debug, Clone, PartialEq)]
pub struct UnitError(pub String);

impl fmt::Display for UnitError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.0)
    }
}

const PREFIXES: [(&str, f64); 10] = [
    ("p", 1e-12),
    ("n", 1e-9),
    ("u", 1e-6),
    ("µ", 1e-6),
    ("μ", 1e-6),
    ("m", 1e-3),
    ("k", 1e3),
    ("K", 1e3),
    ("M", 1e6),
    ("G", 1e9),
];

/// Splits a leading decimal number off `s`.
fn number(s: &str) -> Option<(f64, &str)> {
    let b = s.as_bytes();
    let mut n = 0;
    if n < b.len() && (b[n] == b'+' || b[n] == b'-') {
        n += 1;
    }
    let digits_start = n;
    while n < b.len() && (b[n].is_ascii_digit() || b[n] == b'.') {
        n += 1;
    }
    if n == digits_start {
        return None;
    }
    if n < b.len() && (b[n] == b'e' || b[n] == b'E') {
        let mut m = n + 1;
        if m < b.len() && (b[m] == b'+' || b[m] == b'-') {
            m += 1;
        }
        let exp_digits = m;
        while m < b.len() && b[m].is_ascii_digit() {
            m += 1;
        }
        if m > exp_digits {
            n = m;
        }
    }
    s[..n].parse().ok().map(|v| (v, &s[n..]))
}

/// Parses `text` as a value of `unit`, returning it in the SI unit (a percentage as a fraction,
/// a per-kelvin coefficient as 1/K).
pub fn parse(text: &str, unit: Unit) -> Result<f64, UnitError> {
    let t = text.trim();
    let (value, rest) = number(t).ok_or_else(|| {
        UnitError(format!(
            "`{text}` does not start with a number; write the value with its unit, e.g. {}",
            unit.example()
        ))
    })?;
    if !value.is_finite() {
        return Err(UnitError(format!("`{text}` is not a finite number")));
    }
    let rest = rest.trim_start();
    if rest.is_empty() {
        return Err(UnitError(format!(
            "`{text}` has no unit; write it with its unit, e.g. {}",
            unit.example()
        )));
    }
    if unit == Unit::PerKelvin && rest == "%/K" {
        return Ok(value / 100.0);
    }
    if unit == Unit::Percent && rest == "%" {
        return Ok(value / 100.0);
    }
    if unit.spellings().contains(&rest) {
        return Ok(value);
    }
    if unit.takes_prefix() {
        for (p, scale) in PREFIXES {
            if let Some(sym) = rest.strip_prefix(p)
                && unit.spellings().contains(&sym)
            {
                // Divide by the exact reciprocal for sub-unit prefixes: 50/10⁶ is the double
                // nearest 50 µs, 50·10⁻⁶ is one ulp off.
                return Ok(if scale < 1.0 {
                    value / (1.0 / scale).round()
                } else {
                    value * scale
                });
            }
        }
    }
    Err(UnitError(format!(
        "`{text}`: expected a value in {} (e.g. {}), found unit `{rest}`",
        unit.symbol(),
        unit.example()
    )))
}

/// A tolerance: relative (`"±20 %"`) or absolute in the parameter's unit (`"±0.5 V"`).
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Spread {
    /// ± this fraction of the nominal value.
    Relative(f64),
    /// ± this amount (SI unit of the parameter).
    Absolute(f64),
}

impl Spread {
    /// The lowest and highest values around `nominal`.
    pub fn bounds(self, nominal: f64) -> (f64, f64) {
        match self {
            Spread::Relative(f) => (nominal * (1.0 - f), nominal * (1.0 + f)),
            Spread::Absolute(a) => (nominal - a, nominal + a),
        }
    }
}

/// Parses a spread: `±`, `+-` or `+/-`, then a percentage or a value of `unit` (for a
/// temperature, the absolute spread is in K or °C).
pub fn parse_spread(text: &str, unit: Unit) -> Result<Spread, UnitError> {
    let t = text.trim();
    let body = ["±", "+/-", "+-"]
        .iter()
        .find_map(|p| t.strip_prefix(p))
        .ok_or_else(|| {
            UnitError(format!(
                "`{text}`: a spread starts with ± (or +-), e.g. \"±20 %\" or \"±{}\"",
                unit.example().trim_matches('"')
            ))
        })?;
    let spread = if let Ok(f) = parse(body, Unit::Percent) {
        Spread::Relative(f)
    } else if unit == Unit::Celsius {
        Spread::Absolute(parse(body, Unit::Kelvin).or_else(|_| parse(body, Unit::Celsius))?)
    } else {
        Spread::Absolute(parse(body, unit)?)
    };
    let amount = match spread {
        Spread::Relative(f) | Spread::Absolute(f) => f,
    };
    if amount < 0.0 {
        return Err(UnitError(format!("`{text}`: a spread cannot be negative")));
    }
    if let Spread::Relative(f) = spread
        && f >= 1.0
    {
        return Err(UnitError(format!(
            "`{text}`: a relative spread must be below 100 % (the value would reach zero)"
        )));
    }
    Ok(spread)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_written_forms_of_the_scenario_schema() {
        // SI prefixes per the SI Brochure (BIPM, 9th ed., table 7).
        let cases = [
            ("40 mH", Unit::Henry, 0.040),
            ("18 Ω", Unit::Ohm, 18.0),
            ("18 ohm", Unit::Ohm, 18.0),
            ("4.7kΩ", Unit::Ohm, 4700.0),
            ("50 us", Unit::Second, 50e-6),
            ("50 µs", Unit::Second, 50e-6),
            ("470 pF", Unit::Farad, 470e-12),
            ("0.75 V", Unit::Volt, 0.75),
            ("25 °C", Unit::Celsius, 25.0),
            ("-40 degC", Unit::Celsius, -40.0),
            ("60 %", Unit::Percent, 0.6),
            ("1.5e-3 J", Unit::Joule, 1.5e-3),
            ("0.393 %/K", Unit::PerKelvin, 0.003_93),
            ("2 K/W", Unit::KelvinPerWatt, 2.0),
            ("200 ms", Unit::Second, 0.2),
        ];
        for (text, unit, want) in cases {
            let got = parse(text, unit).unwrap();
            assert!((got - want).abs() <= 1e-12 * want.abs(), "{text}: {got}");
        }
    }

    #[test]
    fn a_value_without_or_with_the_wrong_unit_is_refused() {
        assert!(parse("36", Unit::Volt).unwrap_err().0.contains("no unit"));
        assert!(
            parse("36 mA", Unit::Volt)
                .unwrap_err()
                .0
                .contains("expected a value in V")
        );
        assert!(parse("volts", Unit::Volt).is_err());
        assert!(parse("25 m°C", Unit::Celsius).is_err());
    }

    #[test]
    fn spreads() {
        assert_eq!(
            parse_spread("±20 %", Unit::Henry).unwrap(),
            Spread::Relative(0.2)
        );
        assert_eq!(
            parse_spread("+-0.5 V", Unit::Volt).unwrap(),
            Spread::Absolute(0.5)
        );
        assert_eq!(
            parse_spread("±10 K", Unit::Celsius).unwrap(),
            Spread::Absolute(10.0)
        );
        assert!(parse_spread("20 %", Unit::Henry).is_err());
        assert!(parse_spread("±120 %", Unit::Henry).is_err());
        assert_eq!(Spread::Relative(0.1).bounds(10.0), (9.0, 11.0));
    }
}

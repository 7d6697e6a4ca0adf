//! The table of run settings: one row (`SettingSpec`) per setting, from which everything else
//! is derived — the parser (`Settings::apply`), the canonical text pairs (`Settings::to_pairs`),
//! the command-line flags of `calibrate` and `upload`, the OpenAPI query parameters of an
//! upload, the `GET /api/v1/settings` document, the page's controls and the README's table.
//!
//! Adding a setting is one row in `SPECS` plus its use in `Settings::resolve`; the tests in
//! `settings/tests.rs` check every row generically (round trip, use in `resolve`, stated
//! defaults, flags), so a row that is not wired up fails them.

use crate::spectrum::{DetectorFilter, FilterSetting};

/// One run setting: its text name, what its value means, and how people are told about it.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct SettingSpec {
    /// The text name, with its unit in the name (`bead_diameter_um`): the HTTP field, the query
    /// parameter and the key of the stored canonical pairs.
    pub key: &'static str,
    /// A short name for people (form labels, messages).
    pub label: &'static str,
    /// What the text must be.
    pub kind: Kind,
    /// The unit of a number, as people write it (`µm`); empty when there is none.
    pub unit: &'static str,
    /// One sentence on what the setting does.
    pub help: &'static str,
    /// Whether the setting must be given, and otherwise what applies without it.
    pub absent: Absent,
    /// A valid value that differs from what applies without the setting (shown as an example,
    /// and used by the tests to check that `resolve` uses the setting).
    pub example: &'static str,
    /// The command-line flag.
    pub flag: Flag,
}

/// What a setting's text must be.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Kind {
    /// A finite decimal number, within a plausible range (checked by `Settings::resolve`).
    Number(Range),
    /// A positive whole number, within a plausible range (checked by `Settings::resolve`).
    Count(Range),
    /// `true` or `false` (also `yes`/`no`, `on`/`off`, `1`/`0`), any case.
    Boolean,
    /// One of fixed names, any case, or an alias of one.
    Choice(&'static Choices),
    /// A detector-filter specification: `none`, `fit`, `fit:F3DB:ALPHA` (fitted from these
    /// starting values) or `F3DB:ALPHA` (fixed), with F3DB in hertz and 0 < ALPHA <= 1.
    Filter,
    /// Comma-separated names (at least one).
    Names,
}

/// The plausible range of a number or a count, both ends included.
///
/// Every numeric row has one, so that a value no recording can have (a sample rate of 1e-300 Hz,
/// a billion spectrum windows) is refused at the settings, naming the setting, instead of
/// failing deep in the calibration without a field. The bounds are generous plausibility limits
/// of common practice (no published source): they refuse the absurd, not the unusual, and the
/// calibration still checks what only the recording can tell (an exposure longer than a frame,
/// a height below the bead's radius).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Range {
    /// Smallest accepted value, in the row's unit.
    pub min: f64,
    /// Largest accepted value, in the row's unit.
    pub max: f64,
}

/// The names a choice takes: canonical names (the text `to_pairs` writes) and aliases.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Choices {
    /// Canonical names, in the order people are shown them.
    pub names: &'static [&'static str],
    /// Other accepted spellings and the canonical name each stands for.
    pub aliases: &'static [(&'static str, &'static str)],
}

/// What applies when a setting is not given.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Absent {
    /// The setting must be given; the hint says how (it ends the missing-setting message).
    Required { hint: &'static str },
    /// A value text: giving it explicitly changes nothing (a test checks that against
    /// `resolve`).
    Default(&'static str),
    /// A behaviour that no single value stands for (for example "from the file's header").
    Means(&'static str),
}

/// The command-line form of a setting.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Flag {
    /// `--long VALUE`, the value in the same text as the HTTP field.
    Value {
        long: &'static str,
        value_name: &'static str,
    },
    /// A bare `--long` switch that sets the setting to the text `sets`.
    Switch {
        long: &'static str,
        sets: &'static str,
    },
}

impl Flag {
    /// The long flag name without its dashes.
    pub fn long(&self) -> &'static str {
        match self {
            Flag::Value { long, .. } | Flag::Switch { long, .. } => long,
        }
    }
}

/// A parsed setting value.
#[derive(Clone, Debug, PartialEq)]
pub enum Value {
    Number(f64),
    Count(usize),
    Boolean(bool),
    /// The canonical name of the choice.
    Choice(&'static str),
    Filter(FilterSetting),
    Names(Vec<String>),
}

impl Value {
    /// The canonical text: what `to_pairs` stores and what `Kind::parse` reads back to this
    /// value. Numbers use Rust's shortest round-trip decimal form (`1`, `0.5`, `1e-7` as
    /// `0.0000001`).
    pub fn text(&self) -> String {
        match self {
            Value::Number(x) => format!("{x}"),
            Value::Count(n) => n.to_string(),
            Value::Boolean(b) => b.to_string(),
            Value::Choice(name) => (*name).to_string(),
            Value::Filter(FilterSetting::None) => "none".to_string(),
            Value::Filter(FilterSetting::Fitted(d)) => format!("fit:{}:{}", d.f3db_hz, d.alpha),
            Value::Filter(FilterSetting::Fixed(d)) => format!("{}:{}", d.f3db_hz, d.alpha),
            Value::Names(names) => names.join(","),
        }
    }
}

/// Starting values of a detector filter given as plain `fit`: a slow part with a corner of
/// some kilohertz and an instantaneous fraction below one half, as for a silicon photodiode at
/// 1064 nm (Berg-Sørensen, Oddershede, Florin & Flyvbjerg, J. Appl. Phys. 93, 3167 (2003);
/// figures recalled from memory, unverified). They only start the fit.
const FIT_START: DetectorFilter = DetectorFilter {
    f3db_hz: 8_000.0,
    alpha: 0.4,
};

/// Parses a detector filter specification (see `Kind::Filter`); `None` when it is not one.
pub fn parse_filter(value: &str) -> Option<FilterSetting> {
    let v = value.trim().to_ascii_lowercase();
    let pair = |s: &str| -> Option<DetectorFilter> {
        let (f, a) = s.split_once(':')?;
        let f3db_hz: f64 = f.trim().parse().ok()?;
        let alpha: f64 = a.trim().parse().ok()?;
        (f3db_hz.is_finite() && f3db_hz > 0.0 && alpha > 0.0 && alpha <= 1.0)
            .then_some(DetectorFilter { f3db_hz, alpha })
    };
    match v.as_str() {
        "none" | "" => Some(FilterSetting::None),
        "fit" => Some(FilterSetting::Fitted(FIT_START)),
        _ => match v.strip_prefix("fit:") {
            Some(rest) => pair(rest).map(FilterSetting::Fitted),
            None => pair(&v).map(FilterSetting::Fixed),
        },
    }
}

impl Choices {
    /// The canonical name `text` stands for (a name or an alias, any case).
    pub fn find(&self, text: &str) -> Option<&'static str> {
        let text = text.trim();
        self.names
            .iter()
            .copied()
            .find(|n| n.eq_ignore_ascii_case(text))
            .or_else(|| {
                self.aliases
                    .iter()
                    .find(|(alias, _)| alias.eq_ignore_ascii_case(text))
                    .map(|&(_, name)| name)
            })
    }

    /// "a, b or c".
    pub fn listed(&self) -> String {
        match self.names.split_last() {
            Some((last, [])) => (*last).to_string(),
            Some((last, rest)) => format!("{} or {last}", rest.join(", ")),
            None => String::new(),
        }
    }
}

impl Kind {
    /// The kind's name in the settings document and the OpenAPI descriptions.
    pub fn name(&self) -> &'static str {
        match self {
            Kind::Number(_) => "number",
            Kind::Count(_) => "count",
            Kind::Boolean => "boolean",
            Kind::Choice(_) => "choice",
            Kind::Filter => "filter",
            Kind::Names => "names",
        }
    }

    /// What the text must be, as the end of an error message ("expected ...").
    pub fn expected(&self) -> String {
        match self {
            Kind::Number(_) => "expected a finite number".into(),
            Kind::Count(_) => "expected a positive whole number".into(),
            Kind::Boolean => "expected true or false".into(),
            Kind::Choice(c) => format!("expected {}", c.listed()),
            Kind::Filter => {
                "expected none, fit, fit:F3DB:ALPHA or F3DB:ALPHA with 0 < ALPHA <= 1".into()
            }
            Kind::Names => "expected one or more comma-separated names".into(),
        }
    }

    /// Parses non-blank text; `Err` holds `expected()`. Ranges are not checked here (see
    /// `Range::check`), so that the command line and the HTTP fields report a value out of its
    /// range the same way, once all settings are known.
    pub fn parse(&self, text: &str) -> Result<Value, String> {
        let t = text.trim();
        let value = match self {
            Kind::Number(_) => t
                .parse::<f64>()
                .ok()
                .filter(|v| v.is_finite())
                .map(Value::Number),
            Kind::Count(_) => t.parse::<usize>().ok().filter(|n| *n > 0).map(Value::Count),
            Kind::Boolean => match t.to_ascii_lowercase().as_str() {
                "true" | "yes" | "1" | "on" => Some(Value::Boolean(true)),
                "false" | "no" | "0" | "off" => Some(Value::Boolean(false)),
                _ => None,
            },
            Kind::Choice(c) => c.find(t).map(Value::Choice),
            Kind::Filter => parse_filter(t).map(Value::Filter),
            Kind::Names => {
                let names: Vec<String> = t
                    .split(',')
                    .map(|s| s.trim().to_string())
                    .filter(|s| !s.is_empty())
                    .collect();
                (!names.is_empty()).then_some(Value::Names(names))
            }
        };
        value.ok_or_else(|| self.expected())
    }
}

impl Range {
    /// `Err` with the end of a message ("expected ...") when `x` lies outside (NaN included).
    pub fn check(&self, x: f64) -> Result<(), String> {
        if self.min <= x && x <= self.max {
            Ok(())
        } else {
            Err(format!("expected {}", self.describe()))
        }
    }

    /// The range in words, for messages and documents: `a number from 0.01 to 100`.
    pub fn describe(&self) -> String {
        format!(
            "a number from {} to {}",
            number_text(self.min),
            number_text(self.max)
        )
    }
}

/// A number as people read it: plain decimals for ordinary magnitudes, `1e-300` style beyond
/// them (Rust's plain form of 1e300 has 301 digits).
pub fn number_text(x: f64) -> String {
    let magnitude = x.abs();
    if magnitude != 0.0 && !(1e-6..1e9).contains(&magnitude) {
        format!("{x:e}")
    } else {
        format!("{x}")
    }
}

impl SettingSpec {
    /// Whether the setting may be given more than once (a list of names, one per flag or
    /// field, joined with commas).
    pub fn repeatable(&self) -> bool {
        self.kind == Kind::Names
    }

    /// Whether the setting must be given.
    pub fn required(&self) -> bool {
        matches!(self.absent, Absent::Required { .. })
    }

    /// What applies without the setting, in words; `None` for a required one.
    pub fn default_text(&self) -> Option<&'static str> {
        match self.absent {
            Absent::Required { .. } => None,
            Absent::Default(text) | Absent::Means(text) => Some(text),
        }
    }

    /// The canonical choice names, for a choice.
    pub fn choices(&self) -> Option<&'static [&'static str]> {
        match self.kind {
            Kind::Choice(c) => Some(c.names),
            _ => None,
        }
    }

    /// The label with its unit: `Bead diameter (µm)`.
    pub fn label_with_unit(&self) -> String {
        if self.unit.is_empty() {
            self.label.to_string()
        } else {
            format!("{} ({})", self.label, self.unit)
        }
    }

    /// One line for help texts: label, unit, help, and the default or "required".
    pub fn describe(&self) -> String {
        let tail = match self.absent {
            Absent::Required { .. } => "Required.".to_string(),
            Absent::Default(d) | Absent::Means(d) => format!("Default: {d}."),
        };
        format!("{}. {} {tail}", self.label_with_unit(), self.help)
    }
}

/// Position units: nanometres (camera tracking) or detector volts (photodiode).
pub const UNIT_CHOICES: Choices = Choices {
    names: &["nm", "V"],
    aliases: &[
        ("nanometre", "nm"),
        ("nanometer", "nm"),
        ("volt", "V"),
        ("volts", "V"),
    ],
};

/// File formats, by the names of `ingest::Format::name` and its short aliases.
pub const FORMAT_CHOICES: Choices = Choices {
    names: &[
        "csv", "tsv", "columns", "raw-f32", "raw-f64", "raw-i16", "npy", "npz",
    ],
    aliases: &[("f32", "raw-f32"), ("f64", "raw-f64"), ("i16", "raw-i16")],
};

/// Cell separators of text tables, by the names of `ingest::Delimiter::parse_name`.
pub const DELIMITER_CHOICES: Choices = Choices {
    names: &["comma", "semicolon", "tab", "space"],
    aliases: &[(",", "comma"), (";", "semicolon"), ("whitespace", "space")],
};

/// What equipartition removes before taking the variance.
pub const DETREND_CHOICES: Choices = Choices {
    names: &["mean", "linear"],
    aliases: &[],
};

/// Materials of beads, for their density (`crate::drag` holds the values and their sources).
pub const BEAD_MATERIAL_CHOICES: Choices = Choices {
    names: &["polystyrene", "silica"],
    aliases: &[
        ("ps", "polystyrene"),
        ("sio2", "silica"),
        ("glass", "silica"),
    ],
};

/// Names of the `noise_floor` setting.
pub const NOISE_FLOOR_CHOICES: Choices = Choices {
    names: &["auto", "fit", "off"],
    aliases: &[],
};

/// Every run setting, in the order they are listed to people. The order also fixes `KEYS`
/// and the message that lists the known keys.
pub const SPECS: &[SettingSpec] = &[
    SettingSpec {
        key: "bead_diameter_um",
        label: "Bead diameter",
        kind: Kind::Number(Range {
            min: 0.01,
            max: 100.0,
        }),
        unit: "µm",
        help: "Diameter of the trapped bead, as its supplier states it.",
        absent: Absent::Required {
            hint: "give the bead diameter in micrometres (e.g. 1.0)",
        },
        example: "1.0",
        flag: Flag::Value {
            long: "bead-diameter",
            value_name: "UM",
        },
    },
    SettingSpec {
        key: "bead_diameter_se_um",
        label: "Bead diameter standard error",
        kind: Kind::Number(Range {
            min: 0.0,
            max: 10.0,
        }),
        unit: "µm",
        help: "Standard error of the bead diameter (from the supplier); carried into the \
               stiffness errors.",
        absent: Absent::Default("0"),
        example: "0.02",
        flag: Flag::Value {
            long: "bead-diameter-se",
            value_name: "UM",
        },
    },
    SettingSpec {
        key: "temperature_c",
        label: "Temperature",
        kind: Kind::Number(Range {
            min: -50.0,
            max: 150.0,
        }),
        unit: "°C",
        help: "Sample temperature; sets the thermal energy and the water viscosity.",
        absent: Absent::Required {
            hint: "give the sample temperature in degrees Celsius (e.g. 25)",
        },
        example: "25",
        flag: Flag::Value {
            long: "temperature",
            value_name: "C",
        },
    },
    SettingSpec {
        key: "temperature_se_c",
        label: "Temperature standard error",
        kind: Kind::Number(Range {
            min: 0.0,
            max: 50.0,
        }),
        unit: "°C",
        help: "Standard error of the temperature; carried into the stiffness errors.",
        absent: Absent::Default("0"),
        example: "0.5",
        flag: Flag::Value {
            long: "temperature-se",
            value_name: "C",
        },
    },
    SettingSpec {
        key: "viscosity_mpa_s",
        label: "Viscosity",
        kind: Kind::Number(Range {
            min: 0.01,
            max: 1e6,
        }),
        unit: "mPa·s",
        help: "Give it when the medium is not plain water.",
        absent: Absent::Means("water at the given temperature (IAPWS 2008)"),
        example: "1.2",
        flag: Flag::Value {
            long: "viscosity",
            value_name: "MPA_S",
        },
    },
    SettingSpec {
        key: "viscosity_se_mpa_s",
        label: "Viscosity standard error",
        kind: Kind::Number(Range {
            min: 0.0,
            max: 100_000.0,
        }),
        unit: "mPa·s",
        help: "Standard error of the viscosity: of the value given, or of water's formula when \
               none is given (IAPWS 2008 states about 1 % for liquid water at atmospheric \
               pressure, as recalled); carried into the stiffness errors.",
        absent: Absent::Default("0"),
        example: "0.009",
        flag: Flag::Value {
            long: "viscosity-se",
            value_name: "MPA_S",
        },
    },
    SettingSpec {
        key: "height_um",
        label: "Height above the surface",
        kind: Kind::Number(Range {
            min: 0.001,
            max: 1e4,
        }),
        unit: "µm",
        help: "Height of the bead centre above the surface; turns on the wall correction of \
               the drag.",
        absent: Absent::Means("bulk, no wall correction"),
        example: "5",
        flag: Flag::Value {
            long: "height",
            value_name: "UM",
        },
    },
    SettingSpec {
        key: "height_se_um",
        label: "Height standard error",
        kind: Kind::Number(Range { min: 0.0, max: 1e3 }),
        unit: "µm",
        help: "Standard error of the height; carried into the stiffness errors.",
        absent: Absent::Default("0"),
        example: "0.2",
        flag: Flag::Value {
            long: "height-se",
            value_name: "UM",
        },
    },
    SettingSpec {
        key: "bead_material",
        label: "Bead material",
        kind: Kind::Choice(&BEAD_MATERIAL_CHOICES),
        unit: "",
        help: "Sets the bead density (polystyrene 1050, silica 2000 kg/m³) for the \
               frequency-dependent drag; a bead density given as well wins.",
        absent: Absent::Default("polystyrene"),
        example: "silica",
        flag: Flag::Value {
            long: "bead-material",
            value_name: "NAME",
        },
    },
    SettingSpec {
        key: "bead_density_kg_per_m3",
        label: "Bead density",
        kind: Kind::Number(Range {
            min: 100.0,
            max: 30_000.0,
        }),
        unit: "kg/m³",
        help: "Density of the bead material; used only by the frequency-dependent drag \
               (hydrodynamics).",
        absent: Absent::Means("from the bead material"),
        example: "1500",
        flag: Flag::Value {
            long: "bead-density",
            value_name: "KG_M3",
        },
    },
    SettingSpec {
        key: "medium_density_kg_per_m3",
        label: "Medium density",
        kind: Kind::Number(Range {
            min: 100.0,
            max: 30_000.0,
        }),
        unit: "kg/m³",
        help: "Density of the medium; used only by the frequency-dependent drag. Give it with \
               the viscosity when the medium is not plain water.",
        absent: Absent::Means("water at the given temperature"),
        example: "1100",
        flag: Flag::Value {
            long: "medium-density",
            value_name: "KG_M3",
        },
    },
    SettingSpec {
        key: "sample_rate_hz",
        label: "Sample rate",
        kind: Kind::Number(Range { min: 1.0, max: 1e9 }),
        unit: "Hz",
        help: "Samples per second per axis; needed when the file has no time column, and \
               checked against it when it has one.",
        absent: Absent::Means("from the file's time column"),
        example: "50000",
        flag: Flag::Value {
            long: "sample-rate",
            value_name: "HZ",
        },
    },
    SettingSpec {
        key: "units",
        label: "Position units",
        kind: Kind::Choice(&UNIT_CHOICES),
        unit: "",
        help: "Unit of the samples (nm or detector volts), when the file's header does not \
               name it.",
        absent: Absent::Means("as the file's header says"),
        example: "V",
        flag: Flag::Value {
            long: "units",
            value_name: "nm|V",
        },
    },
    SettingSpec {
        key: "format",
        label: "File format",
        kind: Kind::Choice(&FORMAT_CHOICES),
        unit: "",
        help: "Read the file as this format instead of telling it from its name and first bytes.",
        absent: Absent::Means("told from the file name and the first bytes"),
        example: "raw-f32",
        flag: Flag::Value {
            long: "format",
            value_name: "FORMAT",
        },
    },
    SettingSpec {
        key: "delimiter",
        label: "Cell delimiter",
        kind: Kind::Choice(&DELIMITER_CHOICES),
        unit: "",
        help: "Separator of the cells of a text table (comma, semicolon, tab or space).",
        absent: Absent::Means("told from the header and the first rows"),
        example: ";",
        flag: Flag::Value {
            long: "delimiter",
            value_name: "DELIMITER",
        },
    },
    SettingSpec {
        key: "decimal_comma",
        label: "Decimal comma",
        kind: Kind::Boolean,
        unit: "",
        help: "Whether the numbers of a text table use the comma as the decimal mark (as \
               spreadsheets in many European locales write them).",
        absent: Absent::Means("told from the first rows"),
        example: "true",
        flag: Flag::Value {
            long: "decimal-comma",
            value_name: "BOOL",
        },
    },
    SettingSpec {
        key: "dataset",
        label: "Datasets",
        kind: Kind::Names,
        unit: "",
        help: "The members of a .npz archive to read, one per axis in axis order (repeat the \
               flag or the field, or separate the names with commas); one two-dimensional \
               member may hold all axes.",
        absent: Absent::Means("the one numeric member of at least 1024 samples"),
        example: "x,y",
        flag: Flag::Value {
            long: "dataset",
            value_name: "NAME",
        },
    },
    SettingSpec {
        key: "channels",
        label: "Channels",
        kind: Kind::Count(Range { min: 1.0, max: 3.0 }),
        unit: "",
        help: "Interleaved channels (axes) in a raw binary file.",
        absent: Absent::Means("one channel"),
        example: "2",
        flag: Flag::Value {
            long: "channels",
            value_name: "N",
        },
    },
    SettingSpec {
        key: "volts_per_count",
        label: "Volts per count",
        kind: Kind::Number(Range {
            min: 1e-12,
            max: 1e3,
        }),
        unit: "V",
        help: "Scale of integer samples (raw-i16, integer .npy) in volts per count.",
        absent: Absent::Means("none; raw-i16 files need it"),
        example: "0.0003",
        flag: Flag::Value {
            long: "volts-per-count",
            value_name: "V",
        },
    },
    SettingSpec {
        key: "time_tolerance",
        label: "Time-step tolerance",
        kind: Kind::Number(Range {
            min: 1e-9,
            max: 0.5,
        }),
        unit: "",
        help: "Relative tolerance on uniform time steps, and on the agreement of the time \
               column with the sample rate.",
        absent: Absent::Default("0.001"),
        example: "0.002",
        flag: Flag::Value {
            long: "time-tolerance",
            value_name: "FRACTION",
        },
    },
    SettingSpec {
        key: "fit_min_hz",
        label: "Lowest fitted frequency",
        kind: Kind::Number(Range { min: 0.0, max: 1e9 }),
        unit: "Hz",
        help: "Lower end of the spectral fit.",
        absent: Absent::Means("the larger of 10 Hz and 4 frequency steps"),
        example: "50",
        flag: Flag::Value {
            long: "fit-min",
            value_name: "HZ",
        },
    },
    SettingSpec {
        key: "fit_max_hz",
        label: "Highest fitted frequency",
        kind: Kind::Number(Range {
            min: 1e-3,
            max: 1e9,
        }),
        unit: "Hz",
        help: "Upper end of the spectral fit.",
        absent: Absent::Means("0.8 of the Nyquist frequency, 0.98 with a detector filter"),
        example: "4000",
        flag: Flag::Value {
            long: "fit-max",
            value_name: "HZ",
        },
    },
    SettingSpec {
        key: "windows",
        label: "Spectrum windows",
        kind: Kind::Count(Range {
            min: 1.0,
            max: 10_000.0,
        }),
        unit: "",
        help: "Non-overlapping segments averaged in the periodogram.",
        absent: Absent::Means("segments of about 2^18 samples"),
        example: "4",
        flag: Flag::Value {
            long: "windows",
            value_name: "N",
        },
    },
    SettingSpec {
        key: "detector_filter",
        label: "Detector filter",
        kind: Kind::Filter,
        unit: "",
        help: "Low-pass filter of the photodiode: none; fit (fitted from 8000 Hz and 0.4); \
               fit:F3DB:ALPHA (fitted from these); or F3DB:ALPHA (fixed), F3DB in Hz, \
               0 < ALPHA <= 1.",
        absent: Absent::Default("none"),
        example: "fit",
        flag: Flag::Value {
            long: "detector-filter",
            value_name: "SPEC",
        },
    },
    SettingSpec {
        key: "hydrodynamics",
        label: "Frequency-dependent drag",
        kind: Kind::Boolean,
        unit: "",
        help: "Model the frequency dependence of the drag on a bead in liquid (Stokes; \
               Berg-Sørensen & Flyvbjerg 2004): on or off; off only for data known to lack it, \
               such as simulations of the plain Ornstein-Uhlenbeck process.",
        absent: Absent::Default("true"),
        example: "off",
        flag: Flag::Value {
            long: "hydrodynamics",
            value_name: "on|off",
        },
    },
    SettingSpec {
        key: "exposure_time_s",
        label: "Camera exposure",
        kind: Kind::Number(Range {
            min: 1e-9,
            max: 100.0,
        }),
        unit: "s",
        help: "Exposure time of a camera: each frame is the average position over this time \
               (motion blur), at most the frame interval 1/sample rate.",
        absent: Absent::Means("instantaneous samples (no motion blur)"),
        example: "0.0002",
        flag: Flag::Value {
            long: "exposure-time-s",
            value_name: "S",
        },
    },
    SettingSpec {
        key: "noise_floor",
        label: "White noise floor",
        kind: Kind::Choice(&NOISE_FLOOR_CHOICES),
        unit: "",
        help: "A constant white background in the spectral model: auto (fitted when a \
               likelihood-ratio test at a 1 % false-inclusion rate says the data hold one), \
               fit (always) or off.",
        absent: Absent::Default("auto"),
        example: "off",
        flag: Flag::Value {
            long: "noise-floor",
            value_name: "MODE",
        },
    },
    SettingSpec {
        key: "detrend",
        label: "Equipartition detrend",
        kind: Kind::Choice(&DETREND_CHOICES),
        unit: "",
        help: "What equipartition removes before taking the variance: the mean, or a \
               straight line (slow drift).",
        absent: Absent::Default("mean"),
        example: "linear",
        flag: Flag::Switch {
            long: "linear-detrend",
            sets: "linear",
        },
    },
    SettingSpec {
        key: "axial_axes",
        label: "Axial axes",
        kind: Kind::Names,
        unit: "",
        help: "Comma-separated names of the axes perpendicular to the surface (they get the \
               axial wall correction).",
        absent: Absent::Default("z"),
        example: "x",
        flag: Flag::Value {
            long: "axial-axes",
            value_name: "NAMES",
        },
    },
    SettingSpec {
        key: "principal_axes",
        label: "Principal axes",
        kind: Kind::Boolean,
        unit: "",
        help: "Calibrate the two lateral axes along the trap's principal axes (the detector \
               axes turned by the angle measured from the position covariance) instead of \
               along the detector's axes; nanometre data only.",
        absent: Absent::Default("false"),
        example: "true",
        flag: Flag::Switch {
            long: "principal-axes",
            sets: "true",
        },
    },
    SettingSpec {
        key: "drive_frequency_hz",
        label: "Stage drive frequency",
        kind: Kind::Number(Range {
            min: 1e-3,
            max: 1e9,
        }),
        unit: "Hz",
        help: "Frequency at which the sample stage was oscillated during the recording, for \
               active calibration (with the stage amplitude); below the Nyquist frequency.",
        absent: Absent::Means("no drive: passive calibration with the assumed drag"),
        example: "32",
        flag: Flag::Value {
            long: "drive-frequency",
            value_name: "HZ",
        },
    },
    SettingSpec {
        key: "drive_amplitude_nm",
        label: "Stage drive amplitude",
        kind: Kind::Number(Range {
            min: 1e-3,
            max: 1e7,
        }),
        unit: "nm",
        help: "Amplitude (zero to peak) of the stage's sinusoidal motion; given with the \
               drive frequency.",
        absent: Absent::Means("required when a drive frequency is given"),
        example: "150",
        flag: Flag::Value {
            long: "drive-amplitude",
            value_name: "NM",
        },
    },
    SettingSpec {
        key: "drive_amplitude_se_nm",
        label: "Drive amplitude error",
        kind: Kind::Number(Range { min: 0.0, max: 1e7 }),
        unit: "nm",
        help: "Standard error of the stage amplitude from the stage's own calibration; it \
               enters the sensitivity, the measured drag and the stiffness.",
        absent: Absent::Default("0"),
        example: "3",
        flag: Flag::Value {
            long: "drive-amplitude-se",
            value_name: "NM",
        },
    },
    SettingSpec {
        key: "drive_axis",
        label: "Driven axis",
        kind: Kind::Names,
        unit: "",
        help: "Name of the axis along which the stage was driven (one name).",
        absent: Absent::Means("the recording's first axis"),
        example: "y",
        flag: Flag::Value {
            long: "drive-axis",
            value_name: "NAME",
        },
    },
    SettingSpec {
        key: "drive_drag_to",
        label: "Share measured drag with",
        kind: Kind::Names,
        unit: "",
        help: "Comma-separated lateral axes of the same bead that take the drag measured on \
               the driven lateral axis instead of the drag assumed from the run conditions.",
        absent: Absent::Means("no other axis: undriven axes keep the assumed drag"),
        example: "y",
        flag: Flag::Value {
            long: "drive-drag-to",
            value_name: "NAMES",
        },
    },
    SettingSpec {
        key: "precision_percent",
        label: "Target precision",
        kind: Kind::Number(Range {
            min: 1e-3,
            max: 100.0,
        }),
        unit: "%",
        help: "Relative standard error of the stiffness you need; a larger one is reported \
               as a finding.",
        absent: Absent::Default("5"),
        example: "2",
        flag: Flag::Value {
            long: "precision",
            value_name: "PERCENT",
        },
    },
];

/// The spec of `key`, if it is one.
pub fn spec(key: &str) -> Option<&'static SettingSpec> {
    SPECS.iter().find(|s| s.key == key)
}

/// Every key, in table order.
pub const KEYS: [&str; SPECS.len()] = {
    let mut keys = [""; SPECS.len()];
    let mut i = 0;
    while i < SPECS.len() {
        keys[i] = SPECS[i].key;
        i += 1;
    }
    keys
};

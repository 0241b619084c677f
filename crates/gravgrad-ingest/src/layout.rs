//! The raw flight log, layout version 1 (`docs/formats.md`): column names, units and the limits
//! that validation applies to each.

/// Layout identifier written in HDF5 attributes and accepted in CSV comment lines.
pub const LAYOUT: &str = "raw-flight/1";

/// What a column holds, which decides its unit and its plausibility limits.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Quantity {
    /// GPS seconds.
    Time,
    /// Geodetic latitude, degrees.
    Latitude,
    /// Geodetic longitude, degrees.
    Longitude,
    /// Ellipsoidal height or clearance, metres.
    Height,
    /// An attitude angle, degrees.
    Angle,
    /// Inertial angular rate, rad/s.
    Rate,
    /// Specific force or accelerometer output, m/s².
    Acceleration,
    /// Sensor temperature, °C.
    Temperature,
    /// Integer line number.
    Line,
}

/// One known column of the layout.
#[derive(Clone, Copy, Debug)]
pub struct ColumnDef {
    pub name: &'static str,
    pub quantity: Quantity,
    pub required: bool,
}

const fn def(name: &'static str, quantity: Quantity, required: bool) -> ColumnDef {
    ColumnDef {
        name,
        quantity,
        required,
    }
}

/// The named columns of layout 1, in their documented order (pair columns come from the
/// instrument file and are not listed here).
pub const COLUMNS: [ColumnDef; 19] = [
    def("time", Quantity::Time, true),
    def("lat", Quantity::Latitude, true),
    def("lon", Quantity::Longitude, true),
    def("height", Quantity::Height, true),
    def("roll", Quantity::Angle, true),
    def("pitch", Quantity::Angle, true),
    def("heading", Quantity::Angle, true),
    def("wx", Quantity::Rate, true),
    def("wy", Quantity::Rate, true),
    def("wz", Quantity::Rate, true),
    def("fx", Quantity::Acceleration, true),
    def("fy", Quantity::Acceleration, true),
    def("fz", Quantity::Acceleration, true),
    def("temp", Quantity::Temperature, false),
    def("line", Quantity::Line, false),
    def("clearance", Quantity::Height, false),
    def("ac_roll", Quantity::Angle, false),
    def("ac_pitch", Quantity::Angle, false),
    def("ac_heading", Quantity::Angle, false),
];

/// Columns that a navigation table may supply (merged onto the gradiometer's time base).
pub const NAVIGATION_COLUMNS: [&str; 16] = [
    "lat",
    "lon",
    "height",
    "roll",
    "pitch",
    "heading",
    "wx",
    "wy",
    "wz",
    "fx",
    "fy",
    "fz",
    "clearance",
    "ac_roll",
    "ac_pitch",
    "ac_heading",
];

/// The definition of a named layout column, if it is one.
pub fn column_def(name: &str) -> Option<&'static ColumnDef> {
    COLUMNS.iter().find(|c| c.name == name)
}

/// The largest plausible magnitude of an accelerometer output or specific force, m/s².
pub const MAX_ACCELERATION: f64 = 1000.0;
/// The largest plausible angular rate, rad/s.
pub const MAX_RATE: f64 = 10.0;
/// Heights and clearances beyond this magnitude (m) are not from an aircraft.
pub const MAX_HEIGHT: f64 = 100_000.0;
/// Temperatures beyond this magnitude (°C) are not from a working sensor.
pub const MAX_TEMPERATURE: f64 = 200.0;
/// Attitude angles beyond this magnitude (degrees) suggest radians were logged as degrees the
/// other way round, or a corrupt channel.
pub const MAX_ANGLE_DEG: f64 = 360.0;

impl Quantity {
    /// The inclusive plausible range of values, in the layout's units.
    pub fn range(self) -> (f64, f64) {
        match self {
            Quantity::Time => (0.0, 1.0e10),
            Quantity::Latitude => (-90.0, 90.0),
            Quantity::Longitude => (-180.0, 180.0),
            Quantity::Height => (-MAX_HEIGHT, MAX_HEIGHT),
            Quantity::Angle => (-MAX_ANGLE_DEG, MAX_ANGLE_DEG),
            Quantity::Rate => (-MAX_RATE, MAX_RATE),
            Quantity::Acceleration => (-MAX_ACCELERATION, MAX_ACCELERATION),
            Quantity::Temperature => (-MAX_TEMPERATURE, MAX_TEMPERATURE),
            Quantity::Line => (-1.0e9, 1.0e9),
        }
    }

    /// The unit as written in files and messages.
    pub fn unit(self) -> &'static str {
        match self {
            Quantity::Time => "s",
            Quantity::Latitude | Quantity::Longitude | Quantity::Angle => "deg",
            Quantity::Height => "m",
            Quantity::Rate => "rad/s",
            Quantity::Acceleration => "m/s²",
            Quantity::Temperature => "°C",
            Quantity::Line => "",
        }
    }
}

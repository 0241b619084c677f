//! The NetCDF data model as this crate sees it: dimensions, attributes and variables, shared by
//! the classic reader, the NetCDF-4 reader and the writer.
//!
//! Layout facts: a variable's dimensions run from slowest- to fastest-varying (C order, as in
//! every NetCDF API), so a 2-D variable over (`y`, `x`) holds row after row of `x` values. Type
//! codes are those of the NetCDF classic format specification (`NC_BYTE` = 1 … `NC_UINT64` = 11).

/// External data types of the classic model and the CDF-5 additions, with their type codes.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum NcType {
    /// `NC_BYTE`, 8-bit signed integer.
    Byte,
    /// `NC_CHAR`, 8-bit character (text).
    Char,
    /// `NC_SHORT`, 16-bit signed integer.
    Short,
    /// `NC_INT`, 32-bit signed integer.
    Int,
    /// `NC_FLOAT`, IEEE 754 binary32.
    Float,
    /// `NC_DOUBLE`, IEEE 754 binary64.
    Double,
    /// `NC_UBYTE` (CDF-5 and NetCDF-4 only), 8-bit unsigned integer.
    UByte,
    /// `NC_USHORT` (CDF-5 and NetCDF-4 only), 16-bit unsigned integer.
    UShort,
    /// `NC_UINT` (CDF-5 and NetCDF-4 only), 32-bit unsigned integer.
    UInt,
    /// `NC_INT64` (CDF-5 and NetCDF-4 only), 64-bit signed integer.
    Int64,
    /// `NC_UINT64` (CDF-5 and NetCDF-4 only), 64-bit unsigned integer.
    UInt64,
    /// A NetCDF-4 type outside the list above (string, compound, enum, opaque…): listed so the
    /// file's contents can be named, never read as numbers.
    Other,
}

impl NcType {
    /// The type for a classic-format type code (1–11), `None` for any other code.
    pub fn from_code(code: u32) -> Option<Self> {
        Some(match code {
            1 => Self::Byte,
            2 => Self::Char,
            3 => Self::Short,
            4 => Self::Int,
            5 => Self::Float,
            6 => Self::Double,
            7 => Self::UByte,
            8 => Self::UShort,
            9 => Self::UInt,
            10 => Self::Int64,
            11 => Self::UInt64,
            _ => return None,
        })
    }

    /// The classic-format type code; 0 for [`NcType::Other`], which has none.
    pub fn code(self) -> u32 {
        match self {
            Self::Byte => 1,
            Self::Char => 2,
            Self::Short => 3,
            Self::Int => 4,
            Self::Float => 5,
            Self::Double => 6,
            Self::UByte => 7,
            Self::UShort => 8,
            Self::UInt => 9,
            Self::Int64 => 10,
            Self::UInt64 => 11,
            Self::Other => 0,
        }
    }

    /// Bytes per value in the classic formats (0 for [`NcType::Other`]).
    pub fn size(self) -> u64 {
        match self {
            Self::Byte | Self::Char | Self::UByte => 1,
            Self::Short | Self::UShort => 2,
            Self::Int | Self::Float | Self::UInt => 4,
            Self::Double | Self::Int64 | Self::UInt64 => 8,
            Self::Other => 0,
        }
    }

    /// Whether values of this type read as numbers (every type but text and [`NcType::Other`]).
    pub fn is_numeric(self) -> bool {
        !matches!(self, Self::Char | Self::Other)
    }

    /// The name the NetCDF libraries use (`float`, `short`, …), for messages.
    pub fn name(self) -> &'static str {
        match self {
            Self::Byte => "byte",
            Self::Char => "char",
            Self::Short => "short",
            Self::Int => "int",
            Self::Float => "float",
            Self::Double => "double",
            Self::UByte => "ubyte",
            Self::UShort => "ushort",
            Self::UInt => "uint",
            Self::Int64 => "int64",
            Self::UInt64 => "uint64",
            Self::Other => "a non-numeric NetCDF-4 type",
        }
    }

    /// The default fill value of the NetCDF libraries for this type (`NC_FILL_FLOAT` =
    /// 9.9692099683868690e+36 and so on, from `netcdf.h`), which marks cells never written when a
    /// variable declares no `_FillValue`. `None` for byte and char types, which have no default
    /// fill by the NetCDF User Guide's convention.
    pub fn default_fill(self) -> Option<f64> {
        Some(match self {
            Self::Short => -32767.0,
            Self::Int => -2147483647.0,
            Self::Float => f64::from(9.969_209_968_386_869e36_f64 as f32),
            Self::Double => 9.969_209_968_386_869e36,
            Self::UShort => 65535.0,
            Self::UInt => 4294967295.0,
            Self::Int64 => -9223372036854775806.0,
            Self::UInt64 => 18446744073709551614.0,
            Self::Byte | Self::Char | Self::UByte | Self::Other => return None,
        })
    }
}

/// An attribute's value: text, or a vector of numbers of one type.
#[derive(Clone, Debug, PartialEq)]
pub enum AttrValue {
    /// `NC_CHAR` text (NUL padding removed), or a NetCDF-4 string.
    Text(String),
    Byte(Vec<i8>),
    Short(Vec<i16>),
    Int(Vec<i32>),
    Float(Vec<f32>),
    Double(Vec<f64>),
    UByte(Vec<u8>),
    UShort(Vec<u16>),
    UInt(Vec<u32>),
    Int64(Vec<i64>),
    UInt64(Vec<u64>),
}

impl AttrValue {
    /// The text of a text attribute.
    pub fn text(&self) -> Option<&str> {
        match self {
            Self::Text(s) => Some(s),
            _ => None,
        }
    }

    /// The values of a numeric attribute as f64 (64-bit integers beyond 2⁵³ are rounded).
    pub fn numbers(&self) -> Option<Vec<f64>> {
        Some(match self {
            Self::Text(_) => return None,
            Self::Byte(v) => v.iter().map(|&x| f64::from(x)).collect(),
            Self::Short(v) => v.iter().map(|&x| f64::from(x)).collect(),
            Self::Int(v) => v.iter().map(|&x| f64::from(x)).collect(),
            Self::Float(v) => v.iter().map(|&x| f64::from(x)).collect(),
            Self::Double(v) => v.clone(),
            Self::UByte(v) => v.iter().map(|&x| f64::from(x)).collect(),
            Self::UShort(v) => v.iter().map(|&x| f64::from(x)).collect(),
            Self::UInt(v) => v.iter().map(|&x| f64::from(x)).collect(),
            Self::Int64(v) => v.iter().map(|&x| x as f64).collect(),
            Self::UInt64(v) => v.iter().map(|&x| x as f64).collect(),
        })
    }

    /// The first value of a numeric attribute as f64.
    pub fn number(&self) -> Option<f64> {
        self.numbers().and_then(|v| v.first().copied())
    }

    /// The NetCDF type the value is stored as.
    pub fn nc_type(&self) -> NcType {
        match self {
            Self::Text(_) => NcType::Char,
            Self::Byte(_) => NcType::Byte,
            Self::Short(_) => NcType::Short,
            Self::Int(_) => NcType::Int,
            Self::Float(_) => NcType::Float,
            Self::Double(_) => NcType::Double,
            Self::UByte(_) => NcType::UByte,
            Self::UShort(_) => NcType::UShort,
            Self::UInt(_) => NcType::UInt,
            Self::Int64(_) => NcType::Int64,
            Self::UInt64(_) => NcType::UInt64,
        }
    }

    /// Number of stored elements (bytes of UTF-8 for text).
    pub fn len(&self) -> usize {
        match self {
            Self::Text(s) => s.len(),
            Self::Byte(v) => v.len(),
            Self::Short(v) => v.len(),
            Self::Int(v) => v.len(),
            Self::Float(v) => v.len(),
            Self::Double(v) => v.len(),
            Self::UByte(v) => v.len(),
            Self::UShort(v) => v.len(),
            Self::UInt(v) => v.len(),
            Self::Int64(v) => v.len(),
            Self::UInt64(v) => v.len(),
        }
    }

    /// Whether the value holds no element.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
}

impl From<&str> for AttrValue {
    fn from(s: &str) -> Self {
        Self::Text(s.to_string())
    }
}
impl From<String> for AttrValue {
    fn from(s: String) -> Self {
        Self::Text(s)
    }
}
impl From<f64> for AttrValue {
    fn from(x: f64) -> Self {
        Self::Double(vec![x])
    }
}
impl From<f32> for AttrValue {
    fn from(x: f32) -> Self {
        Self::Float(vec![x])
    }
}
impl From<i32> for AttrValue {
    fn from(x: i32) -> Self {
        Self::Int(vec![x])
    }
}

/// A named attribute of the file (global) or of a variable.
#[derive(Clone, Debug, PartialEq)]
pub struct Attribute {
    pub name: String,
    pub value: AttrValue,
}

/// A named dimension. In the classic formats at most one is unlimited (the record dimension);
/// its `len` is then the number of records in the file.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Dimension {
    pub name: String,
    pub len: u64,
    pub unlimited: bool,
}

/// A variable's description (its values are read through [`crate::NcFile`]).
#[derive(Clone, Debug, PartialEq)]
pub struct Variable {
    pub name: String,
    /// Indices into the file's dimension list, slowest-varying first; empty for a scalar.
    pub dims: Vec<usize>,
    pub nc_type: NcType,
    pub attributes: Vec<Attribute>,
}

impl Variable {
    /// The attribute called `name`, if any.
    pub fn attr(&self, name: &str) -> Option<&AttrValue> {
        find_attr(&self.attributes, name)
    }

    /// The text of the attribute called `name`, if it is text.
    pub fn attr_text(&self, name: &str) -> Option<&str> {
        self.attr(name).and_then(AttrValue::text)
    }
}

/// The attribute called `name` in `attrs`.
pub fn find_attr<'a>(attrs: &'a [Attribute], name: &str) -> Option<&'a AttrValue> {
    attrs.iter().find(|a| a.name == name).map(|a| &a.value)
}

/// Which physical format a file is in.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Format {
    /// CDF-1, the classic format (`CDF\x01`): 32-bit offsets.
    Classic,
    /// CDF-2, the 64-bit offset format (`CDF\x02`).
    Offset64,
    /// CDF-5, the 64-bit data format (`CDF\x05`): 64-bit sizes and the unsigned and 64-bit types.
    Data64,
    /// NetCDF-4: an HDF5 file following the NetCDF-4 conventions.
    Netcdf4,
}

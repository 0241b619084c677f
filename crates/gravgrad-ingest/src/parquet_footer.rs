//! A check of a Parquet footer's declared sizes before the `parquet` crate decodes it.
//!
//! The footer is a Thrift `FileMetaData` struct in the compact protocol (Apache Thrift, "Thrift
//! Compact Protocol" specification; Parquet's `parquet.thrift`). The `parquet` crate reserves
//! memory from counts it reads there — list sizes, and a schema element's `num_children`
//! (`SchemaElement` field 5) — before it knows they are true; a damaged footer declaring
//! 200 million children makes it reserve 1.6 GB. This walk reads every field without keeping
//! any, and refuses a list, map or string longer than the bytes left in the footer, nesting deeper
//! than [`MAX_DEPTH`], or a `num_children` larger than the schema's number of elements.

/// Deepest nesting of structs, lists and maps walked (a flat log's footer nests about 6 deep).
pub const MAX_DEPTH: usize = 64;

/// Thrift compact type codes (also read by [`crate::parquet_pages`]).
pub(crate) const STOP: u8 = 0;
pub(crate) const BOOL_TRUE: u8 = 1;
pub(crate) const BOOL_FALSE: u8 = 2;
pub(crate) const BYTE: u8 = 3;
pub(crate) const I16: u8 = 4;
pub(crate) const I32: u8 = 5;
pub(crate) const I64: u8 = 6;
pub(crate) const DOUBLE: u8 = 7;
pub(crate) const BINARY: u8 = 8;
pub(crate) const LIST: u8 = 9;
pub(crate) const SET: u8 = 10;
pub(crate) const MAP: u8 = 11;
pub(crate) const STRUCT: u8 = 12;

struct Walk<'a> {
    b: &'a [u8],
    pos: usize,
}

/// Where the walk is, for the fields it checks.
#[derive(Clone, Copy, PartialEq)]
enum Ctx {
    /// The root `FileMetaData`.
    Root,
    /// One element of the schema list.
    SchemaElement,
    Other,
}

impl Walk<'_> {
    fn fail<T>(&self, what: &str) -> Result<T, String> {
        Err(format!("{what} at byte {} of the footer", self.pos))
    }
    fn byte(&mut self) -> Result<u8, String> {
        let Some(&x) = self.b.get(self.pos) else {
            return self.fail("the footer ends early");
        };
        self.pos += 1;
        Ok(x)
    }
    fn varint(&mut self) -> Result<u64, String> {
        let mut v: u64 = 0;
        for k in 0..10 {
            let x = self.byte()?;
            v |= u64::from(x & 0x7f) << (7 * k);
            if x & 0x80 == 0 {
                return Ok(v);
            }
        }
        self.fail("a variable-length integer runs over 10 bytes")
    }
    fn zigzag(&mut self) -> Result<i64, String> {
        let v = self.varint()?;
        Ok((v >> 1) as i64 ^ -((v & 1) as i64))
    }
    /// A declared count of items of at least `min_bytes` each, checked against the bytes left.
    fn count(&mut self, n: u64, min_bytes: u64, what: &str) -> Result<u64, String> {
        let left = (self.b.len() - self.pos) as u64;
        if n.saturating_mul(min_bytes) > left {
            return self.fail(&format!(
                "{what} declares {n} items, more than the {left} bytes left can hold"
            ));
        }
        Ok(n)
    }
    fn skip(&mut self, n: u64) -> Result<(), String> {
        let n = self.count(n, 1, "a string")? as usize;
        self.pos += n;
        Ok(())
    }

    /// Walks a value of type `t`; returns the value of an integer, for the checks.
    fn value(&mut self, t: u8, depth: usize, ctx: Ctx, schema_len: u64) -> Result<i64, String> {
        if depth > MAX_DEPTH {
            return self.fail(&format!("nesting deeper than {MAX_DEPTH}"));
        }
        match t {
            BOOL_TRUE | BOOL_FALSE => Ok(0),
            BYTE => self.byte().map(i64::from),
            I16 | I32 | I64 => self.zigzag(),
            DOUBLE => self.skip(8).map(|_| 0),
            BINARY => {
                let n = self.varint()?;
                self.skip(n).map(|_| 0)
            }
            LIST | SET => {
                let h = self.byte()?;
                let et = h & 0x0f;
                let n = match h >> 4 {
                    15 => self.varint()?,
                    n => u64::from(n),
                };
                let n = self.count(n, 1, "a list")?;
                for _ in 0..n {
                    self.element(et, depth + 1, ctx, n)?;
                }
                Ok(n as i64)
            }
            MAP => {
                let n = self.varint()?;
                let n = self.count(n, 2, "a map")?;
                if n > 0 {
                    let kv = self.byte()?;
                    for _ in 0..n {
                        self.element(kv >> 4, depth + 1, Ctx::Other, 0)?;
                        self.element(kv & 0x0f, depth + 1, Ctx::Other, 0)?;
                    }
                }
                Ok(n as i64)
            }
            STRUCT => self.fields(depth + 1, ctx, schema_len).map(|_| 0),
            _ => self.fail(&format!("unknown Thrift type {t}")),
        }
    }

    /// A list element: booleans in lists take one byte each.
    fn element(&mut self, t: u8, depth: usize, ctx: Ctx, n: u64) -> Result<(), String> {
        if t == BOOL_TRUE || t == BOOL_FALSE {
            return self.byte().map(|_| ());
        }
        let inner = if ctx == Ctx::Root && t == STRUCT {
            Ctx::SchemaElement
        } else {
            Ctx::Other
        };
        self.value(t, depth, inner, n).map(|_| ())
    }

    /// The fields of a struct, up to its STOP.
    fn fields(&mut self, depth: usize, ctx: Ctx, schema_len: u64) -> Result<(), String> {
        let mut id: i64 = 0;
        loop {
            let h = self.byte()?;
            let t = h & 0x0f;
            if t == STOP {
                return Ok(());
            }
            id = match h >> 4 {
                0 => self.zigzag()?,
                d => id + i64::from(d),
            };
            // Only the root's field 2 (the schema) gives its elements the SchemaElement context.
            let inner = match (ctx, id) {
                (Ctx::Root, 2) => Ctx::Root,
                _ => Ctx::Other,
            };
            let at = self.pos;
            let v = self.value(t, depth, inner, schema_len)?;
            if ctx == Ctx::SchemaElement && id == 5 && !(0..schema_len as i64).contains(&v) {
                self.pos = at;
                return self.fail(&format!(
                    "a schema element declares {v} children, the schema has {schema_len} \
                     elements"
                ));
            }
        }
    }
}

/// Walks the footer `bytes` (the Thrift `FileMetaData`, without the trailing length and magic);
/// the error says what is declared and where.
pub fn check(bytes: &[u8]) -> Result<(), String> {
    let mut w = Walk { b: bytes, pos: 0 };
    w.fields(0, Ctx::Root, 0)
}

#[cfg(test)]
mod tests {
    use super::*;

    // Hand-made compact-protocol bytes (Thrift compact protocol spec): field header = delta << 4 |
    // type; list header = size << 4 | element type; zigzag varints.

    #[test]
    fn a_schema_element_declaring_too_many_children_is_refused() {
        // FileMetaData { 2: list<struct>[ {5: i32 = 1}, {} ] }
        let ok = [0x29, 0x2c, 0x55, 0x02, 0x00, 0x00, 0x00];
        assert_eq!(check(&ok), Ok(()));
        // num_children = 100000000 (zigzag 200000000).
        let mut bad = vec![0x29, 0x2c, 0x55];
        let mut v: u64 = 200_000_000;
        while v >= 0x80 {
            bad.push((v as u8 & 0x7f) | 0x80);
            v >>= 7;
        }
        bad.push(v as u8);
        bad.extend([0x00, 0x00, 0x00]);
        let e = check(&bad).unwrap_err();
        assert!(e.contains("100000000 children"), "{e}");
    }

    #[test]
    fn lists_longer_than_the_footer_are_refused() {
        // Field 4 (row groups): a list of structs declaring 1e6 elements in a few bytes.
        let bad = [0x49, 0xfc, 0xc0, 0x84, 0x3d, 0x00];
        let e = check(&bad).unwrap_err();
        assert!(e.contains("1000000 items"), "{e}");
    }
}

//! Contiguous field storage on the lattice: one value per voxel, x fastest, with name and units.

/// A scalar field over the lattice. `f64` where a solver needs it; other element types for labels.
#[derive(Debug, Clone, PartialEq)]
pub struct Field<T = f64> {
    /// Dataset name in the run file.
    pub name: &'static str,
    /// SI units (UDUNITS-style string, "1" for dimensionless).
    pub units: &'static str,
    /// One line on what the field holds.
    pub description: &'static str,
    /// Values, indexed by [`crate::lattice::Lattice::idx`].
    pub data: Vec<T>,
}

impl<T: Clone> Field<T> {
    /// A field of `len` voxels, all `value`.
    pub fn filled(name: &'static str, units: &'static str, description: &'static str, len: usize, value: T) -> Self {
        Field { name, units, description, data: vec![value; len] }
    }
}

impl<T> Field<T> {
    /// Number of voxels.
    pub fn len(&self) -> usize {
        self.data.len()
    }

    /// Whether the field holds no voxel.
    pub fn is_empty(&self) -> bool {
        self.data.is_empty()
    }
}

impl Field<f64> {
    /// Sum of all values.
    pub fn sum(&self) -> f64 {
        self.data.iter().sum()
    }

    /// Smallest and largest value.
    pub fn min_max(&self) -> (f64, f64) {
        self.data.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), &v| (lo.min(v), hi.max(v)))
    }

    /// Index of the first non-finite value, if any.
    pub fn first_non_finite(&self) -> Option<usize> {
        self.data.iter().position(|v| !v.is_finite())
    }
}

/// A view of any field for output, whatever its element type.
pub enum FieldRef<'a> {
    F64(&'a Field<f64>),
    U8(&'a Field<u8>),
}

impl FieldRef<'_> {
    /// Name, units, description.
    pub fn meta(&self) -> (&'static str, &'static str, &'static str) {
        match self {
            FieldRef::F64(f) => (f.name, f.units, f.description),
            FieldRef::U8(f) => (f.name, f.units, f.description),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn filled_fields_have_the_asked_size_and_value() {
        let f = Field::filled("p", "Pa", "pressure", 27, 2.0);
        assert_eq!(f.len(), 27);
        assert_eq!(f.sum(), 54.0);
        assert_eq!(f.min_max(), (2.0, 2.0));
        let mut g = f.clone();
        g.data[5] = f64::NAN;
        assert_eq!(g.first_non_finite(), Some(5));
    }
}

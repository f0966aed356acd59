//! Tables of numbers at the library's boundary: named columns over an
//! `ndarray` array, one row per item (a posterior sample, an observation,
//! a sensitivity cell), so that a caller (a test, a notebook binding) gets
//! the data without parsing a file. The files Latens writes are views of
//! these tables.

use ndarray::{Array2, ArrayView1};

/// Named columns of `f64`, one row per item.
#[derive(Clone, Debug, PartialEq)]
pub struct Table {
    pub columns: Vec<&'static str>,
    /// Rows by columns.
    pub values: Array2<f64>,
}

impl Table {
    /// A table from rows (each as long as `columns`).
    pub fn from_rows(columns: Vec<&'static str>, rows: impl IntoIterator<Item = Vec<f64>>) -> Table {
        let n = columns.len();
        let flat: Vec<f64> = rows
            .into_iter()
            .flat_map(|r| {
                assert_eq!(r.len(), n, "a row of a table has as many values as columns");
                r
            })
            .collect();
        let values = Array2::from_shape_vec((flat.len() / n.max(1), n), flat).expect("rows of equal length");
        Table { columns, values }
    }

    pub fn n_rows(&self) -> usize {
        self.values.nrows()
    }

    /// The column of that name.
    pub fn column(&self, name: &str) -> Option<ArrayView1<'_, f64>> {
        self.columns.iter().position(|c| *c == name).map(|k| self.values.column(k))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn columns_are_found_by_name_and_rows_keep_their_order() {
        let t = Table::from_rows(vec!["a", "b"], vec![vec![1.0, 2.0], vec![3.0, 4.0], vec![5.0, 6.0]]);
        assert_eq!(t.n_rows(), 3);
        assert_eq!(t.column("b").unwrap().to_vec(), vec![2.0, 4.0, 6.0]);
        assert!(t.column("c").is_none());
        let empty = Table::from_rows(vec!["a"], Vec::<Vec<f64>>::new());
        assert_eq!(empty.values.shape(), &[0, 1]);
    }
}

//! The vectors as the map engine holds them.

/// Row-major f32 matrix: one item a row.
#[derive(Debug, Clone, PartialEq)]
pub struct Matrix {
    pub rows: usize,
    pub cols: usize,
    pub data: Vec<f32>,
}

impl Matrix {
    pub fn row(&self, i: usize) -> &[f32] {
        &self.data[i * self.cols..(i + 1) * self.cols]
    }
}

impl From<vitrine_format::npy::NpyArray> for Matrix {
    fn from(a: vitrine_format::npy::NpyArray) -> Matrix {
        Matrix {
            rows: a.rows,
            cols: a.cols,
            data: a.data,
        }
    }
}

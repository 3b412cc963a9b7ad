//! The inputs of one time step, validated against the grid and the levels.

use ndarray::{Array2, Array3, ArrayView2, ArrayView3};

use crate::{CoreError, Grid, Levels, Selection};

/// The fields of one time step on one grid: 3-D arrays are `[level, lat, lon]` with levels
/// bottom-up, 2-D arrays `[lat, lon]`. Missing values are `NaN`.
///
/// Built with [`FieldsBuilder`], which checks every shape; at least one of geopotential height
/// and temperature is present.
#[derive(Debug, Clone)]
pub struct Fields {
    grid: Grid,
    levels: Levels,
    z: Option<Array3<f32>>,
    t: Option<Array3<f32>>,
    q: Option<Array3<f32>>,
    wind: Option<(Array3<f32>, Array3<f32>)>,
    ps: Option<Array2<f32>>,
    zs: Option<Array2<f32>>,
}

/// Builds [`Fields`] and checks shapes.
#[derive(Debug, Clone)]
pub struct FieldsBuilder {
    fields: Fields,
}

impl FieldsBuilder {
    /// Starts from a grid and levels with no fields.
    pub fn new(grid: Grid, levels: Levels) -> Self {
        Self {
            fields: Fields {
                grid,
                levels,
                z: None,
                t: None,
                q: None,
                wind: None,
                ps: None,
                zs: None,
            },
        }
    }

    /// Geopotential height Z in geopotential metres.
    pub fn geopotential_height(mut self, z: Array3<f32>) -> Self {
        self.fields.z = Some(z);
        self
    }

    /// Air temperature in K.
    pub fn temperature(mut self, t: Array3<f32>) -> Self {
        self.fields.t = Some(t);
        self
    }

    /// Specific humidity in kg kg⁻¹ (turns layer means into virtual temperature).
    pub fn specific_humidity(mut self, q: Array3<f32>) -> Self {
        self.fields.q = Some(q);
        self
    }

    /// Eastward and northward wind in m s⁻¹.
    pub fn wind(mut self, u: Array3<f32>, v: Array3<f32>) -> Self {
        self.fields.wind = Some((u, v));
        self
    }

    /// Surface pressure in Pa.
    pub fn surface_pressure(mut self, ps: Array2<f32>) -> Self {
        self.fields.ps = Some(ps);
        self
    }

    /// Surface geopotential height (orography) in geopotential metres.
    pub fn surface_height(mut self, zs: Array2<f32>) -> Self {
        self.fields.zs = Some(zs);
        self
    }

    /// Checks every shape against the grid and the levels.
    pub fn build(self) -> Result<Fields, CoreError> {
        let mut f = self.fields;
        // The kernel walks rows as contiguous slices: store every array in standard layout.
        for a in [&mut f.z, &mut f.t, &mut f.q].into_iter().flatten() {
            standardise(a);
        }
        if let Some((u, v)) = &mut f.wind {
            standardise(u);
            standardise(v);
        }
        for a in [&mut f.ps, &mut f.zs].into_iter().flatten() {
            standardise(a);
        }
        let shape3 = vec![f.levels.len(), f.grid.n_lat(), f.grid.n_lon()];
        let shape2 = vec![f.grid.n_lat(), f.grid.n_lon()];
        let check = |what, found: &[usize], expected: &Vec<usize>| {
            if found == expected.as_slice() {
                Ok(())
            } else {
                Err(CoreError::ShapeMismatch {
                    what,
                    found: found.to_vec(),
                    expected: expected.clone(),
                })
            }
        };
        if let Some(a) = &f.z {
            check("geopotential height", a.shape(), &shape3)?;
        }
        if let Some(a) = &f.t {
            check("temperature", a.shape(), &shape3)?;
        }
        if let Some(a) = &f.q {
            check("specific humidity", a.shape(), &shape3)?;
        }
        if let Some((u, v)) = &f.wind {
            check("eastward wind", u.shape(), &shape3)?;
            check("northward wind", v.shape(), &shape3)?;
        }
        if let Some(a) = &f.ps {
            check("surface pressure", a.shape(), &shape2)?;
        }
        if let Some(a) = &f.zs {
            check("surface height", a.shape(), &shape2)?;
        }
        if f.z.is_none() && f.t.is_none() {
            return Err(CoreError::NoThicknessInput);
        }
        Ok(f)
    }
}

fn standardise<D: ndarray::Dimension>(a: &mut ndarray::Array<f32, D>) {
    if !a.is_standard_layout() {
        *a = a.as_standard_layout().into_owned();
    }
}

impl Fields {
    /// The grid.
    pub fn grid(&self) -> &Grid {
        &self.grid
    }

    /// The levels, bottom-up.
    pub fn levels(&self) -> &Levels {
        &self.levels
    }

    /// Geopotential height, gpm.
    pub fn geopotential_height(&self) -> Option<ArrayView3<'_, f32>> {
        self.z.as_ref().map(|a| a.view())
    }

    /// Temperature, K.
    pub fn temperature(&self) -> Option<ArrayView3<'_, f32>> {
        self.t.as_ref().map(|a| a.view())
    }

    /// Specific humidity, kg kg⁻¹.
    pub fn specific_humidity(&self) -> Option<ArrayView3<'_, f32>> {
        self.q.as_ref().map(|a| a.view())
    }

    /// Eastward and northward wind, m s⁻¹.
    pub fn wind(&self) -> Option<(ArrayView3<'_, f32>, ArrayView3<'_, f32>)> {
        self.wind.as_ref().map(|(u, v)| (u.view(), v.view()))
    }

    /// Surface pressure, Pa.
    pub fn surface_pressure(&self) -> Option<ArrayView2<'_, f32>> {
        self.ps.as_ref().map(|a| a.view())
    }

    /// Surface geopotential height, gpm.
    pub fn surface_height(&self) -> Option<ArrayView2<'_, f32>> {
        self.zs.as_ref().map(|a| a.view())
    }

    /// The number of stored values of every field (what one time step holds in memory, at
    /// four bytes each).
    pub fn n_values(&self) -> usize {
        let volumes = [self.geopotential_height(), self.temperature(), self.specific_humidity()]
            .into_iter()
            .flatten()
            .map(|a| a.len())
            .sum::<usize>();
        let wind = self.wind().map_or(0, |(u, v)| u.len() + v.len());
        let surfaces =
            [self.surface_pressure(), self.surface_height()].into_iter().flatten().map(|a| a.len());
        volumes + wind + surfaces.sum::<usize>()
    }

    /// The same fields on the block `sel` of the grid (for example a box with its halo).
    pub fn subset(&self, sel: &Selection) -> Fields {
        let ranges = sel.col_ranges();
        let (n_rows, n_cols, n_lon) = (sel.rows.len(), sel.cols.len, self.grid.n_lon());
        // The arrays are in standard layout (`FieldsBuilder::build`): each row's runs of
        // columns are copied as slices.
        let cut = |data: &[f32], planes: usize| -> Vec<f32> {
            let n_lat = self.grid.n_lat();
            let mut out = Vec::with_capacity(planes * n_rows * n_cols);
            for k in 0..planes {
                for j in sel.rows.clone() {
                    let row = &data[(k * n_lat + j) * n_lon..][..n_lon];
                    for r in &ranges {
                        out.extend_from_slice(&row[r.clone()]);
                    }
                }
            }
            out
        };
        let cut3 = |a: &Array3<f32>| {
            let planes = a.dim().0;
            let data = a.as_slice().expect("fields are kept in standard layout");
            Array3::from_shape_vec((planes, n_rows, n_cols), cut(data, planes))
                .expect("the block's shape holds its values")
        };
        let cut2 = |a: &Array2<f32>| {
            let data = a.as_slice().expect("fields are kept in standard layout");
            Array2::from_shape_vec((n_rows, n_cols), cut(data, 1))
                .expect("the block's shape holds its values")
        };
        Fields {
            grid: self.grid.subset(sel),
            levels: self.levels.clone(),
            z: self.z.as_ref().map(cut3),
            t: self.t.as_ref().map(cut3),
            q: self.q.as_ref().map(cut3),
            wind: self.wind.as_ref().map(|(u, v)| (cut3(u), cut3(v))),
            ps: self.ps.as_ref().map(cut2),
            zs: self.zs.as_ref().map(cut2),
        }
    }
}

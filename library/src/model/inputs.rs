//! What a built model reads from a table, for the layers that predict on
//! new rows (figures, contrasts): each input column with its levels or its
//! centre, and the spline terms with their bases.

use super::posterior::Model;
use super::spline::BSplineBasis;
use super::terms::TermRecipe;

/// One column the model's terms read.
#[derive(Debug, Clone, PartialEq)]
pub enum Input {
    /// A category column with its levels in model order.
    Category { column: String, levels: Vec<String> },
    /// A real column with the centre its terms use.
    Real { column: String, centre: f64 },
}

impl Input {
    pub fn column(&self) -> &str {
        match self {
            Input::Category { column, .. } | Input::Real { column, .. } => column,
        }
    }
}

/// A spline term: its predictor, its basis, and the coefficient positions of
/// basis functions 2..=k (the first function is dropped, see [`crate::model`]).
#[derive(Debug, Clone, PartialEq)]
pub struct SplineTerm<'m> {
    pub column: &'m str,
    pub basis: &'m BSplineBasis,
    pub coefficients: Vec<usize>,
}

impl Model {
    /// Every input column once, in term order.
    pub fn inputs(&self) -> Vec<Input> {
        let mut inputs: Vec<Input> = Vec::new();
        let mut push = |input: Input| {
            if !inputs.iter().any(|i| i.column() == input.column()) {
                inputs.push(input);
            }
        };
        for recipe in &self.recipes {
            match recipe {
                TermRecipe::Intercept => {}
                TermRecipe::LevelIntercepts { column, levels }
                | TermRecipe::LevelOffsets { column, levels }
                | TermRecipe::Steps { column, levels } => {
                    push(Input::Category { column: column.clone(), levels: levels.clone() })
                }
                TermRecipe::Slope { column, centre, .. } | TermRecipe::Powers { column, centre, .. } => {
                    push(Input::Real { column: column.clone(), centre: *centre })
                }
                TermRecipe::SlopePer { column, centre, by, levels, .. } => {
                    push(Input::Real { column: column.clone(), centre: *centre });
                    push(Input::Category { column: by.clone(), levels: levels.clone() });
                }
                TermRecipe::Spline { column, basis } => {
                    let (lo, hi) = basis.range();
                    push(Input::Real { column: column.clone(), centre: 0.5 * (lo + hi) })
                }
            }
        }
        inputs
    }

    /// The coefficient position of the intercept, or of the first level's
    /// intercept when a category term gives one intercept per level.
    pub fn intercept_position(&self) -> Option<usize> {
        let mut start = 0;
        for recipe in &self.recipes {
            if matches!(recipe, TermRecipe::Intercept | TermRecipe::LevelIntercepts { .. }) {
                return Some(start);
            }
            start += recipe.labels().len();
        }
        None
    }

    /// The coefficient position of `column`'s one linear slope, when the
    /// column enters the model through that slope alone (no powers,
    /// spline, per-level slopes, and not as the category of a per-level
    /// slope); its design column is `column − centre`.
    pub fn linear_slope_position(&self, column: &str) -> Option<usize> {
        let mut start = 0;
        let mut found = None;
        for recipe in &self.recipes {
            let reads = match recipe {
                TermRecipe::Intercept => false,
                TermRecipe::LevelIntercepts { column: c, .. }
                | TermRecipe::LevelOffsets { column: c, .. }
                | TermRecipe::Steps { column: c, .. } => c == column,
                TermRecipe::Slope { column: c, .. } => {
                    if c == column {
                        found = Some(start);
                    }
                    false
                }
                TermRecipe::SlopePer { column: c, by, .. } => c == column || by == column,
                TermRecipe::Powers { column: c, .. } | TermRecipe::Spline { column: c, .. } => c == column,
            };
            if reads {
                return None;
            }
            start += recipe.labels().len();
        }
        found
    }

    /// The centre taken off `column` in its one linear slope's design
    /// column (`column − centre`; 0 under `centre off`), when it enters
    /// through that slope alone ([`Model::linear_slope_position`]).
    pub fn linear_slope_centre(&self, column: &str) -> Option<f64> {
        self.linear_slope_position(column)?;
        self.recipes.iter().find_map(|r| match r {
            TermRecipe::Slope { column: c, centre, .. } if c == column => Some(*centre),
            _ => None,
        })
    }

    /// The design columns that are intercepts: the intercept, or one per
    /// level of the first category term.
    pub fn intercept_columns(&self) -> Vec<usize> {
        super::build::intercept_columns(&self.recipes)
    }

    /// The spline terms of the model.
    pub fn spline_terms(&self) -> Vec<SplineTerm<'_>> {
        let mut start = 0;
        let mut terms = Vec::new();
        for recipe in &self.recipes {
            let width = recipe.labels().len();
            if let TermRecipe::Spline { column, basis } = recipe {
                terms.push(SplineTerm { column, basis, coefficients: (start..start + width).collect() });
            }
            start += width;
        }
        terms
    }
}

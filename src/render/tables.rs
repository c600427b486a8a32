//! The run's CSV tables, `wells.csv` and `conditions.csv`, as polars DataFrames written with
//! polars' CSV writer. Units are written into the headers (`rate [uM/s]`, `substrate [uM]`).
//!
//! Text from the layout (factor names and values) is written spreadsheet-safe: a cell starting
//! with `=`, `+`, `-`, `@`, a tab or a carriage return gets a leading `'`, as spreadsheet-safe
//! CSV writers do, so that a spreadsheet opening the table shows the text instead of running it as
//! a formula (plain numbers such as `-5` are left alone: they are no formula). A factor named like
//! one of the tables' columns is written as `factor:NAME` in both tables (`Layout::factor_header`).

use polars::prelude::*;

use crate::groups::units::RateExpression;
use crate::layout::Layout;
use crate::rates::conditions::Condition;
pub use crate::rates::conditions::TableError;
use crate::rates::window_fit::LineFit;
use crate::rates::PlateAnalysis;
use crate::render::words::{correction_words, flag_count_words};

/// The quantity columns the layout has, with their headers: (header, which quantity).
fn quantity_headers(layout: &Layout) -> Vec<(String, Quantity)> {
    let mut headers = Vec::new();
    if let Some(unit) = layout.substrate_unit {
        headers.push((format!("substrate [{unit}]"), Quantity::Substrate));
    }
    if let Some(unit) = layout.enzyme_unit_text() {
        headers.push((format!("enzyme [{unit}]"), Quantity::Enzyme));
    }
    if let Some(unit) = layout.inhibitor_unit {
        headers.push((format!("inhibitor [{unit}]"), Quantity::Inhibitor));
    }
    headers
}

#[derive(Debug, Clone, Copy)]
enum Quantity {
    Substrate,
    Enzyme,
    Inhibitor,
}

fn pick(
    quantity: Quantity,
    substrate: Option<f64>,
    enzyme: Option<f64>,
    inhibitor: Option<f64>,
) -> Option<f64> {
    match quantity {
        Quantity::Substrate => substrate,
        Quantity::Enzyme => enzyme,
        Quantity::Inhibitor => inhibitor,
    }
}

/// Text as a spreadsheet-safe CSV cell (module docs).
pub fn spreadsheet_safe(text: &str) -> String {
    let starts_like_formula = text.starts_with(['=', '+', '-', '@', '\t', '\r']);
    let plain_number =
        crate::files::sheet::number_shape(text) != crate::files::sheet::NumberShape::NotANumber;
    if starts_like_formula && !plain_number {
        format!("'{text}")
    } else {
        text.to_string()
    }
}

/// The factor columns of a table: each factor under its header, its values spreadsheet-safe.
fn factor_columns<'a>(layout: &Layout, values_of: impl Fn(&str) -> Vec<String> + 'a) -> Vec<Column> {
    layout
        .factor_names
        .iter()
        .map(|name| {
            let values: Vec<String> = values_of(name)
                .iter()
                .map(|value| spreadsheet_safe(value))
                .collect();
            Column::new(spreadsheet_safe(&layout.factor_header(name)).into(), values)
        })
        .collect()
}

/// Empty text as a missing value, so the CSV cell is empty rather than `""`.
fn non_empty(text: String) -> Option<String> {
    (!text.is_empty()).then_some(text)
}

/// Writes a DataFrame as CSV bytes.
pub fn csv_bytes(frame: &mut DataFrame) -> Result<Vec<u8>, TableError> {
    let mut bytes = Vec::new();
    CsvWriter::new(&mut bytes).include_header(true).finish(frame)?;
    Ok(bytes)
}

/// `wells.csv`: one row per layout well that is not `empty`.
pub fn wells_table(
    analysis: &PlateAnalysis,
    layout: &Layout,
    rates: &RateExpression,
) -> Result<DataFrame, TableError> {
    let wells = &analysis.wells;
    let unit = &rates.unit;
    let rate_column = |value: fn(&crate::rates::WellResult) -> Option<f64>| -> Vec<Option<f64>> {
        wells.iter().map(|w| rates.optional(value(w))).collect()
    };
    let mut columns = vec![
        Column::new(
            "well".into(),
            wells.iter().map(|w| w.well.to_string()).collect::<Vec<_>>(),
        ),
        Column::new(
            "role".into(),
            wells.iter().map(|w| w.setup.role.to_string()).collect::<Vec<_>>(),
        ),
    ];
    for (header, quantity) in quantity_headers(layout) {
        let values: Vec<Option<f64>> = wells
            .iter()
            .map(|w| pick(quantity, w.setup.substrate, w.setup.enzyme, w.setup.inhibitor))
            .collect();
        columns.push(Column::new(header.into(), values));
    }
    columns.extend(factor_columns(layout, |name| {
        wells
            .iter()
            .map(|w| w.setup.factors.get(name).cloned().unwrap_or_default())
            .collect()
    }));
    let fit_value = |f: fn(&LineFit) -> f64| -> Vec<Option<f64>> {
        wells.iter().map(|w| w.rate.fit.as_ref().map(f)).collect()
    };
    columns.extend([
        Column::new(format!("rate [{unit}]").into(), rate_column(|w| w.rate_value)),
        Column::new(format!("rate_se [{unit}]").into(), rate_column(|w| w.rate_se)),
        Column::new(
            format!("window_slope [{unit}]").into(),
            rate_column(|w| w.window_slope),
        ),
        Column::new(
            format!("substrate_sensitivity [{unit}]").into(),
            rate_column(|w| w.substrate_sensitivity),
        ),
        Column::new(
            format!("background [{unit}]").into(),
            rate_column(|w| w.background),
        ),
        Column::new(
            format!("intercept [{}]", analysis.signal.amount_unit()).into(),
            fit_value(|f| f.intercept),
        ),
        Column::new("r2".into(), fit_value(|f| f.r2)),
        Column::new(
            "window_start [s]".into(),
            wells
                .iter()
                .map(|w| w.rate.window_s.map(|s| s.0))
                .collect::<Vec<_>>(),
        ),
        Column::new(
            "window_end [s]".into(),
            wells
                .iter()
                .map(|w| w.rate.window_s.map(|s| s.1))
                .collect::<Vec<_>>(),
        ),
        Column::new(
            "n_points".into(),
            wells
                .iter()
                .map(|w| w.rate.fit.map(|f| f.n_points as u32))
                .collect::<Vec<_>>(),
        ),
        Column::new(
            "conversion".into(),
            wells.iter().map(|w| w.rate.conversion).collect::<Vec<_>>(),
        ),
        Column::new(
            "flags".into(),
            wells.iter().map(|w| non_empty(w.flag_text())).collect::<Vec<_>>(),
        ),
        Column::new("used".into(), wells.iter().map(|w| w.used).collect::<Vec<_>>()),
        Column::new(
            "correction".into(),
            wells
                .iter()
                .map(|w| correction_words(&w.correction, &analysis.signal, rates))
                .collect::<Vec<_>>(),
        ),
        Column::new(
            "notes".into(),
            wells
                .iter()
                .map(|w| non_empty(w.rate.notes.join("; ")))
                .collect::<Vec<_>>(),
        ),
    ]);
    Ok(DataFrame::new(wells.len(), columns)?)
}

/// `conditions.csv`: one row per condition.
pub fn conditions_table(
    conditions: &[Condition],
    layout: &Layout,
    rates: &RateExpression,
) -> Result<DataFrame, TableError> {
    let rate_unit = &rates.unit;
    let rate_column = |value: fn(&Condition) -> Option<f64>| -> Vec<Option<f64>> {
        conditions.iter().map(|c| rates.optional(value(c))).collect()
    };
    let mut columns = vec![Column::new(
        "role".into(),
        conditions.iter().map(|c| c.role.to_string()).collect::<Vec<_>>(),
    )];
    for (header, quantity) in quantity_headers(layout) {
        let values: Vec<Option<f64>> = conditions
            .iter()
            .map(|c| pick(quantity, c.substrate, c.enzyme, c.inhibitor))
            .collect();
        columns.push(Column::new(header.into(), values));
    }
    columns.extend(factor_columns(layout, |name| {
        conditions
            .iter()
            .map(|c| c.factors.get(name).cloned().unwrap_or_default())
            .collect()
    }));
    columns.extend([
        Column::new(
            "n".into(),
            conditions.iter().map(|c| c.n as u32).collect::<Vec<_>>(),
        ),
        Column::new(
            "n_used".into(),
            conditions.iter().map(|c| c.n_used as u32).collect::<Vec<_>>(),
        ),
        Column::new(
            format!("rate_mean [{rate_unit}]").into(),
            rate_column(|c| c.rate_mean),
        ),
        Column::new(
            format!("rate_sd [{rate_unit}]").into(),
            rate_column(|c| c.rate_sd),
        ),
        Column::new(
            format!("rate_sem [{rate_unit}]").into(),
            rate_column(|c| c.rate_sem),
        ),
        Column::new("cv".into(), conditions.iter().map(|c| c.cv).collect::<Vec<_>>()),
        Column::new(
            "flags".into(),
            conditions
                .iter()
                .map(|c| non_empty(flag_count_words(&c.flags)))
                .collect::<Vec<_>>(),
        ),
    ]);
    Ok(DataFrame::new(conditions.len(), columns)?)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Spreadsheet-safe text: what would run as a formula gets a leading `'`; plain numbers and
    /// other text stay as they are (OWASP's advice on CSV injection; common practice).
    #[test]
    fn formula_like_text_is_neutralised_and_numbers_are_not() {
        assert_eq!(spreadsheet_safe("=HYPERLINK(\"x\")"), "'=HYPERLINK(\"x\")");
        assert_eq!(spreadsheet_safe("+1+2"), "'+1+2");
        assert_eq!(spreadsheet_safe("-1+2"), "'-1+2");
        assert_eq!(spreadsheet_safe("@SUM(1)"), "'@SUM(1)");
        assert_eq!(spreadsheet_safe("\tcmd"), "'\tcmd");
        assert_eq!(spreadsheet_safe("-5"), "-5");
        assert_eq!(spreadsheet_safe("+0.5"), "+0.5");
        assert_eq!(spreadsheet_safe("FenA-wt"), "FenA-wt");
        assert_eq!(spreadsheet_safe(""), "");
    }
}

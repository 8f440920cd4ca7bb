//! CSV export of every series a record holds (`run --out DIR --csv`), for numpy, pandas or a
//! spreadsheet: one file per plot or table, SI values, the unit in each header.

use std::fmt::Write as _;
use std::path::{Path, PathBuf};

use super::io::{RecordError, write_atomic};
use super::{CellOutput, Column, Record};
use crate::notebook::expr::Dim;

fn header(c: &Column) -> String {
    let dim = Dim(c.dim);
    let unit = if dim == Dim::DIMENSIONLESS {
        String::new()
    } else {
        format!(" [{dim}]")
    };
    let text = format!("{}{unit}", c.label);
    // RFC 4180 quoting: labels may hold commas, as in `population(g, r)`.
    format!("\"{}\"", text.replace('"', "\"\""))
}

/// The CSV text of one output, if it holds series.
pub fn table(output: &CellOutput) -> Option<String> {
    let mut s = String::new();
    let cols: Vec<&Column> = match output {
        CellOutput::Curves { x, curves, .. } => std::iter::once(x).chain(curves).collect(),
        CellOutput::Table { columns, .. } => columns.iter().collect(),
        CellOutput::Map { x, y, z, .. } => {
            let _ = writeln!(s, "{},{},{}", header(x), header(y), header(z));
            for (i, xv) in x.values.iter().enumerate() {
                for (j, yv) in y.values.iter().enumerate() {
                    let zv = z.values.get(i * y.values.len() + j)?;
                    let _ = writeln!(s, "{xv:e},{yv:e},{zv:e}");
                }
            }
            return Some(s);
        }
        CellOutput::Checks { .. } | CellOutput::Results { .. } => return None,
    };
    let _ = writeln!(
        s,
        "{}",
        cols.iter().map(|c| header(c)).collect::<Vec<_>>().join(",")
    );
    let rows = cols.iter().map(|c| c.values.len()).max().unwrap_or(0);
    for r in 0..rows {
        let row: Vec<String> = cols
            .iter()
            .map(|c| c.values.get(r).map_or(String::new(), |v| format!("{v:e}")))
            .collect();
        let _ = writeln!(s, "{}", row.join(","));
    }
    Some(s)
}

/// Write `DIR/NAME-KIND-LINE.csv` for every plot and table of `record`; returns the paths.
pub fn write_all(dir: &Path, record: &Record) -> Result<Vec<PathBuf>, RecordError> {
    let mut out = Vec::new();
    for cell in &record.cells {
        let Some(text) = cell.output.as_ref().and_then(table) else {
            continue;
        };
        let tag = cell
            .name
            .clone()
            .unwrap_or_else(|| format!("{}-line{}", cell.kind, cell.line));
        let path = dir.join(format!("{}-{tag}.csv", record.name));
        write_atomic(&path, text.as_bytes())?;
        out.push(path);
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn curves_become_columns_with_units_and_maps_long_rows() {
        let col = |label: &str, dim: [i8; 5], values: Vec<f64>| Column {
            label: label.into(),
            title: None,
            dim,
            values,
        };
        let curves = CellOutput::Curves {
            y_title: None,
            title: "t".into(),
            x: col("scan.delta", [-1, 0, 0, 0, 0], vec![0.0, 1.0]),
            curves: vec![col("scan.final.population(g, e)", [0; 5], vec![0.5, 0.25])],
            log_x: false,
            log_y: false,
        };
        let text = table(&curves).unwrap();
        let lines: Vec<&str> = text.lines().collect();
        assert_eq!(
            lines[0],
            "\"scan.delta [s⁻¹]\",\"scan.final.population(g, e)\""
        );
        assert_eq!(lines[2], "1e0,2.5e-1");
        let map = CellOutput::Map {
            title: "m".into(),
            x: col("a", [0; 5], vec![1.0, 2.0]),
            y: col("b", [0; 5], vec![3.0]),
            z: col("z", [0; 5], vec![5.0, 6.0]),
        };
        assert_eq!(table(&map).unwrap().lines().nth(2), Some("2e0,3e0,6e0"));
    }
}

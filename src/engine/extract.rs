//! Generic extraction primitives for engine output: the last (or first) regex match, a numeric
//! block after a marker line (N rows, chosen columns), and a flat run of numbers after a marker
//! (vector, full matrix, or packed lower/upper triangle). Numbers may use Fortran `D` exponents.
//!
//! Every function returns a message (never panics) that says what was looked for and what was
//! found instead, so the caller can report truncated, empty or garbled output.

use regex::Regex;

/// Parse one number, accepting Fortran `D`/`d` exponents (`1.5D-03`). Non-finite values parse
/// (so that NaN can be reported as such by the validation step).
pub fn parse_number(tok: &str) -> Option<f64> {
    let t = tok.trim();
    if t.is_empty() {
        return None;
    }
    let fixed: String = t
        .chars()
        .map(|c| if c == 'D' || c == 'd' { 'e' } else { c })
        .collect();
    fixed.parse::<f64>().ok()
}

/// Which regex match to take.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Occurrence {
    First,
    Last,
}

/// The number captured by group 1 (or the group named `value`) of the first/last match.
pub fn regex_number(text: &str, re: &Regex, which: Occurrence) -> Result<f64, String> {
    let mut caps = re.captures_iter(text);
    let c = match which {
        Occurrence::First => caps.next(),
        Occurrence::Last => caps.last(),
    };
    let Some(c) = c else {
        return Err(format!("no match for /{}/", re.as_str()));
    };
    let m = c.name("value").or_else(|| c.get(1)).or_else(|| c.get(0));
    let s = m.map(|m| m.as_str()).unwrap_or("");
    parse_number(s).ok_or_else(|| format!("/{}/ matched '{s}', which is not a number", re.as_str()))
}

/// Index of the line after the last line matching `marker` (or 0 without a marker).
fn start_after(lines: &[&str], marker: Option<&Regex>) -> Result<usize, String> {
    match marker {
        None => Ok(0),
        Some(re) => lines
            .iter()
            .rposition(|l| re.is_match(l))
            .map(|i| i + 1)
            .ok_or_else(|| format!("marker line /{}/ not found", re.as_str())),
    }
}

/// A block of `rows` lines starting `skip` lines after the last marker line; from each line the
/// whitespace-separated fields at `columns` (0-based) are taken, row by row.
pub fn block(
    text: &str,
    marker: Option<&Regex>,
    skip: usize,
    rows: usize,
    columns: &[usize],
) -> Result<Vec<f64>, String> {
    let lines: Vec<&str> = text.lines().collect();
    let first = start_after(&lines, marker)? + skip;
    let mut out = Vec::with_capacity(rows * columns.len());
    for r in 0..rows {
        let Some(line) = lines.get(first + r) else {
            return Err(format!(
                "expected {rows} rows of numbers, the output ends after {r} (truncated?)"
            ));
        };
        let fields: Vec<&str> = line.split_whitespace().collect();
        for &c in columns {
            let Some(f) = fields.get(c) else {
                return Err(format!(
                    "row {} has {} fields, column {} asked for: '{}'",
                    r + 1,
                    fields.len(),
                    c + 1,
                    line.trim()
                ));
            };
            match parse_number(f) {
                Some(v) => out.push(v),
                None => {
                    return Err(format!(
                        "row {}, column {}: '{f}' is not a number",
                        r + 1,
                        c + 1
                    ))
                }
            }
        }
    }
    Ok(out)
}

/// `count` numbers read token by token, starting `skip` lines after the last marker line.
/// Any non-numeric token before `count` numbers are read is an error (garbled output).
pub fn numbers(
    text: &str,
    marker: Option<&Regex>,
    skip: usize,
    count: usize,
) -> Result<Vec<f64>, String> {
    let lines: Vec<&str> = text.lines().collect();
    let first = start_after(&lines, marker)? + skip;
    let mut out = Vec::with_capacity(count);
    for line in lines.iter().skip(first) {
        if out.len() == count {
            break;
        }
        for tok in line.split_whitespace() {
            if out.len() == count {
                break;
            }
            match parse_number(tok) {
                Some(v) => out.push(v),
                None => {
                    return Err(format!(
                        "expected {count} numbers, found '{tok}' after {}",
                        out.len()
                    ))
                }
            }
        }
    }
    if out.len() < count {
        return Err(format!(
            "expected {count} numbers, the output ends after {} (truncated?)",
            out.len()
        ));
    }
    Ok(out)
}

/// How a flat list of numbers lays out a square matrix of side n.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Layout {
    /// Row by row, n·n numbers.
    Full,
    /// Packed lower triangle row by row: (1,1), (2,1), (2,2), (3,1), ... n(n+1)/2 numbers.
    LowerTriangle,
    /// Packed upper triangle row by row: (1,1), (1,2), ..., (1,n), (2,2), ... n(n+1)/2 numbers.
    UpperTriangle,
}

impl Layout {
    pub fn count(self, n: usize) -> usize {
        match self {
            Layout::Full => n * n,
            Layout::LowerTriangle | Layout::UpperTriangle => n * (n + 1) / 2,
        }
    }

    /// Square matrix (row-major `Vec` of rows) from the flat list; triangles are mirrored.
    pub fn unpack(self, n: usize, v: &[f64]) -> Result<nalgebra::DMatrix<f64>, String> {
        if v.len() != self.count(n) {
            return Err(format!(
                "a {n}x{n} matrix in this layout needs {} numbers, got {}",
                self.count(n),
                v.len()
            ));
        }
        let mut m = nalgebra::DMatrix::zeros(n, n);
        match self {
            Layout::Full => {
                for i in 0..n {
                    for j in 0..n {
                        m[(i, j)] = v[i * n + j];
                    }
                }
            }
            Layout::LowerTriangle => {
                let mut k = 0;
                for i in 0..n {
                    for j in 0..=i {
                        m[(i, j)] = v[k];
                        m[(j, i)] = v[k];
                        k += 1;
                    }
                }
            }
            Layout::UpperTriangle => {
                let mut k = 0;
                for i in 0..n {
                    for j in i..n {
                        m[(i, j)] = v[k];
                        m[(j, i)] = v[k];
                        k += 1;
                    }
                }
            }
        }
        Ok(m)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn fortran_exponents_and_garbage() {
        assert_eq!(parse_number("1.5D-03"), Some(1.5e-3));
        assert_eq!(parse_number("-2.0d+2"), Some(-200.0));
        assert_eq!(
            parse_number("4.1649113622526E-20"),
            Some(4.1649113622526e-20)
        );
        assert!(parse_number("NaN").unwrap().is_nan());
        assert_eq!(parse_number("O"), None);
        assert_eq!(parse_number(""), None);
    }

    #[test]
    fn last_match_wins() {
        let re = Regex::new(r"TOTAL ENERGY\s+(\S+)\s+Eh").unwrap();
        let t = "| TOTAL ENERGY  -1.5 Eh |\n...\n| TOTAL ENERGY  -2.25 Eh |\n";
        assert_eq!(regex_number(t, &re, Occurrence::Last).unwrap(), -2.25);
        assert_eq!(regex_number(t, &re, Occurrence::First).unwrap(), -1.5);
        assert!(regex_number("nothing", &re, Occurrence::Last).is_err());
        let bad = "| TOTAL ENERGY  ****** Eh |";
        assert!(regex_number(bad, &re, Occurrence::Last)
            .unwrap_err()
            .contains("not a number"));
    }

    // The Turbomole-style gradient file as xtb 6.5.1 writes it (engines.md, section 1).
    const GRAD: &str = "$grad
  cycle =      1    SCF energy =    -5.07054443983   |dE/dxyz| =  0.000071
      0.00000000000000      0.00000000006508      0.19976324886264      O
      0.00000000000000      1.45903294672702     -0.87570868486904      H
      0.00000000000000     -1.45903294679211     -0.87570868491944      H
     4.1649113622526E-20   7.0809834224270E-11  -1.7732111748353E-05
    -2.2209191311139E-20  -4.7550006509074E-05   8.8660819713739E-06
    -1.9439922311387E-20   4.7549935699237E-05   8.8660297769844E-06
$end
";

    #[test]
    fn block_after_marker() {
        let m = Regex::new(r"^\$grad").unwrap();
        let g = block(GRAD, Some(&m), 4, 3, &[0, 1, 2]).unwrap();
        assert_eq!(g.len(), 9);
        assert_eq!(g[2], -1.7732111748353e-05);
        assert_eq!(g[7], 4.7549935699237e-05);
        // Truncated: one row missing.
        let cut: String = GRAD.lines().take(7).collect::<Vec<_>>().join("\n");
        assert!(block(&cut, Some(&m), 4, 3, &[0, 1, 2])
            .unwrap_err()
            .contains("truncated"));
        // Wrong rows: the element symbol column is not a number.
        assert!(block(GRAD, Some(&m), 1, 3, &[0, 1, 2, 3]).is_err());
        assert!(block(GRAD, Some(&Regex::new("^nomark").unwrap()), 0, 1, &[0]).is_err());
    }

    #[test]
    fn numbers_and_layouts() {
        let t = "$hessian\n 1 2 3\n 2 4 5\n 3 5\n 6\n";
        let m = Regex::new(r"^\$hessian").unwrap();
        let v = numbers(t, Some(&m), 0, 9).unwrap();
        let h = Layout::Full.unpack(3, &v).unwrap();
        assert_eq!(h[(1, 2)], 5.0);
        assert_eq!(h[(2, 2)], 6.0);
        assert!(numbers(t, Some(&m), 0, 10)
            .unwrap_err()
            .contains("truncated"));
        let lower = Layout::LowerTriangle
            .unpack(3, &[1.0, 2.0, 4.0, 3.0, 5.0, 6.0])
            .unwrap();
        assert_eq!(lower, h);
        let upper = Layout::UpperTriangle
            .unpack(3, &[1.0, 2.0, 3.0, 4.0, 5.0, 6.0])
            .unwrap();
        assert_eq!(upper, h);
        assert!(Layout::Full.unpack(3, &[1.0]).is_err());
        assert!(numbers("$hessian\n1 2 x 4\n", Some(&m), 0, 4)
            .unwrap_err()
            .contains("'x'"));
    }
}

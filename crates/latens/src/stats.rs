//! Small statistical functions that no chosen crate provides.

/// ln Gamma(x) for x > 0 (Lanczos approximation with the coefficients of
/// Numerical Recipes, 2nd ed., sec. 6.1, recalled from memory; relative error
/// below 2e-10).
pub fn ln_gamma(x: f64) -> f64 {
    const C: [f64; 6] = [
        76.180_091_729_471_46,
        -86.505_320_329_416_77,
        24.014_098_240_830_91,
        -1.231_739_572_450_155,
        0.120_865_097_386_617_9e-2,
        -0.539_523_938_495_3e-5,
    ];
    let mut y = x;
    let tmp = x + 5.5;
    let tmp = tmp - (x + 0.5) * tmp.ln();
    let mut ser = 1.000_000_000_190_015;
    for c in C {
        y += 1.0;
        ser += c / y;
    }
    -tmp + (2.506_628_274_631_000_5 * ser / x).ln()
}

/// The upper regularised incomplete gamma function Q(a, x), by the series
/// for P when x < a + 1 and the continued fraction for Q otherwise
/// (Numerical Recipes, sec. 6.2).
pub fn gamma_q(a: f64, x: f64) -> f64 {
    if x <= 0.0 {
        return 1.0;
    }
    let log_prefactor = -x + a * x.ln() - ln_gamma(a);
    if x < a + 1.0 {
        let mut ap = a;
        let mut del = 1.0 / a;
        let mut sum = del;
        for _ in 0..10_000 {
            ap += 1.0;
            del *= x / ap;
            sum += del;
            if del.abs() < sum.abs() * 1e-16 {
                break;
            }
        }
        1.0 - sum * log_prefactor.exp()
    } else {
        // Modified Lentz continued fraction.
        let tiny = 1e-300;
        let mut b = x + 1.0 - a;
        let mut c = 1.0 / tiny;
        let mut d = 1.0 / b;
        let mut h = d;
        for i in 1..10_000 {
            let an = -(i as f64) * (i as f64 - a);
            b += 2.0;
            d = an * d + b;
            if d.abs() < tiny {
                d = tiny;
            }
            c = b + an / c;
            if c.abs() < tiny {
                c = tiny;
            }
            d = 1.0 / d;
            let del = d * c;
            h *= del;
            if (del - 1.0).abs() < 1e-16 {
                break;
            }
        }
        log_prefactor.exp() * h
    }
}

/// The probability that a chi-square variable with `dof` degrees of freedom
/// exceeds `x` (the p-value of a chi-square test).
pub fn chi_square_survival(x: f64, dof: f64) -> f64 {
    gamma_q(0.5 * dof, 0.5 * x)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn gamma_of_integers_is_a_factorial() {
        for (n, f) in [(1.0, 1.0), (5.0, 24.0), (11.0, 3_628_800.0)] {
            assert!((ln_gamma(n) - f64::ln(f)).abs() < 1e-9);
        }
    }

    #[test]
    fn chi_square_with_two_dof_is_exponential() {
        // For 2 degrees of freedom the tail is exp(-x/2) exactly.
        for x in [0.1, 1.0, 7.0, 25.0, 60.0] {
            let want = (-x / 2.0f64).exp();
            assert!((chi_square_survival(x, 2.0) / want - 1.0).abs() < 1e-9);
        }
    }
}

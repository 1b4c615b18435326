/**
 * Distribution functions shared by the stages (gross-error tests in reconcile, confidence intervals
 * and fit gates in estimate), written here so that critical values do not depend on a statistics
 * package: log-gamma, the regularized incomplete gamma and beta functions, the chi-square, normal and
 * Student-t distributions and their quantiles, and the Šidák correction. Invalid arguments throw
 * RangeError (a caller's bug, not a data condition).
 */

const EPS = 2.220446049250313e-16;
const TINY = 1e-300;

// Lanczos approximation, g = 7, n = 9 (Godfrey's coefficients): about 15 digits for x > 0.
const LANCZOS = [
  0.99999999999980993, 676.5203681218851, -1259.1392167224028, 771.32342877765313, -176.61502916214059,
  12.507343278686905, -0.13857109526572012, 9.9843695780195716e-6, 1.5056327351493116e-7,
];

/** Natural log of the gamma function, for x > 0. */
export function lnGamma(x: number): number {
  if (x < 0.5) {
    // Reflection keeps the Lanczos sum in its accurate range.
    return Math.log(Math.PI / Math.abs(Math.sin(Math.PI * x))) - lnGamma(1 - x);
  }
  const z = x - 1;
  let sum = LANCZOS[0]!;
  for (let i = 1; i < LANCZOS.length; i++) sum += LANCZOS[i]! / (z + i);
  const t = z + 7.5;
  return 0.5 * Math.log(2 * Math.PI) + (z + 0.5) * Math.log(t) - t + Math.log(sum);
}

// Series for P(a, x), convergent for all x but fast only for x < a + 1 (Numerical Recipes, 3rd ed., §6.2).
function gammaPSeries(a: number, x: number, lnPrefix: number): number {
  let ap = a;
  let del = 1 / a;
  let sum = del;
  for (let n = 0; n < 10_000; n++) {
    ap += 1;
    del *= x / ap;
    sum += del;
    if (Math.abs(del) < Math.abs(sum) * EPS) break;
  }
  return sum * Math.exp(lnPrefix);
}

// Continued fraction for Q(a, x) by modified Lentz, fast for x > a + 1 (Numerical Recipes, 3rd ed., §6.2).
function gammaQFraction(a: number, x: number, lnPrefix: number): number {
  let b = x + 1 - a;
  let c = 1 / TINY;
  let d = 1 / b;
  let h = d;
  for (let i = 1; i < 10_000; i++) {
    const an = -i * (i - a);
    b += 2;
    d = an * d + b;
    if (Math.abs(d) < TINY) d = TINY;
    c = b + an / c;
    if (Math.abs(c) < TINY) c = TINY;
    d = 1 / d;
    const del = d * c;
    h *= del;
    if (Math.abs(del - 1) < EPS) break;
  }
  return Math.exp(lnPrefix) * h;
}

/** Both tails of the regularized incomplete gamma function, each computed without cancellation. */
function gammaTails(a: number, x: number): { p: number; q: number } {
  if (!(a > 0) || !(x >= 0)) throw new RangeError(`incomplete gamma needs a > 0 and x >= 0 (a=${a}, x=${x})`);
  if (x === 0) return { p: 0, q: 1 };
  if (x === Number.POSITIVE_INFINITY) return { p: 1, q: 0 };
  const lnPrefix = a * Math.log(x) - x - lnGamma(a);
  if (x < a + 1) {
    const p = gammaPSeries(a, x, lnPrefix);
    return { p, q: 1 - p };
  }
  const q = gammaQFraction(a, x, lnPrefix);
  return { p: 1 - q, q };
}

/** Regularized lower incomplete gamma P(a, x) = γ(a, x)/Γ(a); a > 0, x ≥ 0. */
export function gammaP(a: number, x: number): number {
  return gammaTails(a, x).p;
}

/** Regularized upper incomplete gamma Q(a, x) = 1 − P(a, x), accurate in the far tail. */
export function gammaQ(a: number, x: number): number {
  return gammaTails(a, x).q;
}

/**
 * Inverse of the regularized incomplete gamma: the x with P(a, x) = p (equivalently Q(a, x) = q).
 * Pass the tail that is small for full relative accuracy there; `q` defaults to 1 − p.
 * Start and Halley iteration after Numerical Recipes, 3rd ed., §6.2.1 (`invgammp`), but the
 * residual is taken on the smaller tail so upper quantiles such as χ²₀.₉₉ keep all their digits.
 */
export function gammaPInverse(a: number, p: number, q = 1 - p): number {
  if (!(a > 0)) throw new RangeError(`gammaPInverse needs a > 0 (a=${a})`);
  if (!(p >= 0 && p <= 1)) throw new RangeError(`gammaPInverse needs 0 <= p <= 1 (p=${p})`);
  if (p === 0) return 0;
  if (q === 0) return Number.POSITIVE_INFINITY;
  const useLower = p <= 0.5;
  const a1 = a - 1;
  const gln = lnGamma(a);
  const lna1 = a > 1 ? Math.log(a1) : 0;
  const afac = a > 1 ? Math.exp(a1 * (lna1 - 1) - gln) : 0;
  let x: number;
  if (a > 1) {
    // Wilson–Hilferty start from a normal deviate (Abramowitz & Stegun 26.2.23 rational approximation).
    const pp = useLower ? p : q;
    const t = Math.sqrt(-2 * Math.log(pp));
    let z = (2.30753 + t * 0.27061) / (1 + t * (0.99229 + t * 0.04481)) - t;
    if (!useLower) z = -z;
    x = Math.max(1e-3, a * (1 - 1 / (9 * a) - z / (3 * Math.sqrt(a))) ** 3);
  } else {
    const t = 1 - a * (0.253 + a * 0.12);
    x = p < t ? (p / t) ** (1 / a) : 1 - Math.log(1 - (p - t) / (1 - t));
  }
  for (let j = 0; j < 100; j++) {
    if (x <= 0) return 0;
    const tails = gammaTails(a, x);
    const err = useLower ? tails.p - p : q - tails.q;
    const pdf =
      a > 1 ? afac * Math.exp(-(x - a1) + a1 * (Math.log(x) - lna1)) : Math.exp(-x + a1 * Math.log(x) - gln);
    if (pdf === 0) break;
    const u = err / pdf;
    const step = u / (1 - 0.5 * Math.min(1, u * (a1 / x - 1)));
    x -= step;
    if (x <= 0) x = 0.5 * (x + step);
    if (Math.abs(step) < 1e-15 * x) break;
  }
  return x;
}

/** Chi-square cumulative distribution P(X ≤ x) for `dof` degrees of freedom. */
export function chiSquareCdf(x: number, dof: number): number {
  return x <= 0 ? 0 : gammaP(dof / 2, x / 2);
}

/** Chi-square upper tail P(X > x), the p-value of a global test statistic. */
export function chiSquareSurvival(x: number, dof: number): number {
  return x <= 0 ? 1 : gammaQ(dof / 2, x / 2);
}

/** The chi-square quantile with lower-tail probability p: P(X ≤ x) = p. */
export function chiSquareQuantile(p: number, dof: number): number {
  return 2 * gammaPInverse(dof / 2, p);
}

/** The chi-square upper critical value at significance alpha: P(X > x) = alpha. */
export function chiSquareCritical(alpha: number, dof: number): number {
  return 2 * gammaPInverse(dof / 2, 1 - alpha, alpha);
}

/** Complementary error function, through erfc(x) = Q(1/2, x²) for x ≥ 0. */
export function erfc(x: number): number {
  if (x < 0) return 2 - erfc(-x);
  return gammaQ(0.5, x * x);
}

/** Standard normal cumulative distribution Φ(x). */
export function normalCdf(x: number): number {
  return 0.5 * erfc(-x / Math.SQRT2);
}

// Acklam (2003), "An algorithm for computing the inverse normal cumulative distribution function":
// rational approximations with relative error below 1.15e-9, then one Halley step on Φ.
const ACKLAM_A = [
  -3.969683028665376e1, 2.209460984245205e2, -2.759285104469687e2, 1.38357751867269e2, -3.066479806614716e1,
  2.506628277459239,
];
const ACKLAM_B = [
  -5.447609879822406e1, 1.615858368580409e2, -1.556989798598866e2, 6.680131188771972e1, -1.328068155288572e1,
];
const ACKLAM_C = [
  -7.784894002430293e-3, -3.223964580411365e-1, -2.400758277161838, -2.549732539343734, 4.374664141464968,
  2.938163982698783,
];
const ACKLAM_D = [7.784695709041462e-3, 3.224671290700398e-1, 2.445134137142996, 3.754408661907416];

function poly(c: readonly number[], x: number): number {
  let s = 0;
  for (const ci of c) s = s * x + ci;
  return s;
}

// Lower-tail quantile for 0 < p ≤ 0.5 (the refinement is done on that tail, where Φ has full relative accuracy).
function lowerNormalQuantile(p: number): number {
  let x: number;
  if (p < 0.02425) {
    const q = Math.sqrt(-2 * Math.log(p));
    x = poly(ACKLAM_C, q) / (poly(ACKLAM_D, q) * q + 1);
  } else {
    const q = p - 0.5;
    const r = q * q;
    x = (poly(ACKLAM_A, r) * q) / (poly(ACKLAM_B, r) * r + 1);
  }
  const e = normalCdf(x) - p;
  const u = e * Math.sqrt(2 * Math.PI) * Math.exp((x * x) / 2);
  return x - u / (1 + (x * u) / 2);
}

/** Standard normal quantile Φ⁻¹(p), 0 < p < 1 (±Infinity at 0 and 1). */
export function normalQuantile(p: number): number {
  if (!(p >= 0 && p <= 1)) throw new RangeError(`normalQuantile needs 0 <= p <= 1 (p=${p})`);
  if (p === 0) return Number.NEGATIVE_INFINITY;
  if (p === 1) return Number.POSITIVE_INFINITY;
  return p <= 0.5 ? lowerNormalQuantile(p) : -lowerNormalQuantile(1 - p);
}

/** Šidák per-test significance for n tests at family-wise level alpha: α' = 1 − (1 − α)^(1/n). */
export function sidakAlpha(alpha: number, n: number): number {
  if (n <= 1) return alpha;
  // expm1/log1p keep α' accurate when it is tiny (many tests).
  return -Math.expm1(Math.log1p(-alpha) / n);
}

/** Two-sided standard-normal critical value for n tests at family-wise level alpha (Šidák). */
export function sidakNormalCritical(alpha: number, n: number): number {
  return -lowerNormalQuantile(sidakAlpha(alpha, n) / 2);
}

/** Continued fraction for the incomplete beta (modified Lentz; Numerical Recipes 3rd ed. §6.4). */
function betaContinuedFraction(a: number, b: number, x: number): number {
  let c = 1;
  let d = 1 - ((a + b) * x) / (a + 1);
  if (Math.abs(d) < TINY) d = TINY;
  d = 1 / d;
  let h = d;
  for (let m = 1; m <= 10000; m++) {
    const m2 = 2 * m;
    let aa = (m * (b - m) * x) / ((a + m2 - 1) * (a + m2));
    d = 1 + aa * d;
    if (Math.abs(d) < TINY) d = TINY;
    c = 1 + aa / c;
    if (Math.abs(c) < TINY) c = TINY;
    d = 1 / d;
    h *= d * c;
    aa = (-(a + m) * (a + b + m) * x) / ((a + m2) * (a + m2 + 1));
    d = 1 + aa * d;
    if (Math.abs(d) < TINY) d = TINY;
    c = 1 + aa / c;
    if (Math.abs(c) < TINY) c = TINY;
    d = 1 / d;
    const del = d * c;
    h *= del;
    if (Math.abs(del - 1) < 1e-16) break;
  }
  return h;
}

/** Regularized incomplete beta I_x(a, b), 0 ≤ x ≤ 1, a, b > 0. */
export function incompleteBeta(x: number, a: number, b: number): number {
  if (x <= 0) return 0;
  if (x >= 1) return 1;
  const front = Math.exp(lnGamma(a + b) - lnGamma(a) - lnGamma(b) + a * Math.log(x) + b * Math.log1p(-x));
  if (x < (a + 1) / (a + b + 2)) return (front * betaContinuedFraction(a, b, x)) / a;
  return 1 - (front * betaContinuedFraction(b, a, 1 - x)) / b;
}

/** Student-t cumulative distribution P(T ≤ t) with `dof` degrees of freedom. */
export function studentTCdf(t: number, dof: number): number {
  const tail = 0.5 * incompleteBeta(dof / (dof + t * t), dof / 2, 0.5);
  return t > 0 ? 1 - tail : tail;
}

function studentTPdf(t: number, dof: number): number {
  return Math.exp(
    lnGamma((dof + 1) / 2) -
      lnGamma(dof / 2) -
      0.5 * Math.log(dof * Math.PI) -
      ((dof + 1) / 2) * Math.log1p((t * t) / dof),
  );
}

/**
 * Solves upper(x) = q for a decreasing upper tail on [lo, ∞) by Newton steps kept inside a bracket,
 * bisecting when Newton leaves it; the tail is computed directly to keep precision far out.
 */
function invertUpperTail(
  upper: (x: number) => number,
  pdf: (x: number) => number,
  q: number,
  start: number,
  lo: number,
) {
  let a = lo;
  let b = Math.max(start, lo + 1);
  while (upper(b) > q) {
    a = b;
    b *= 2;
    if (b > 1e300) return Number.POSITIVE_INFINITY;
  }
  let x = Math.min(Math.max(start, a), b);
  for (let i = 0; i < 200; i++) {
    const f = upper(x) - q;
    if (f > 0) a = x;
    else b = x;
    const d = pdf(x);
    let next = d > 0 ? x + f / d : Number.NaN;
    if (!(next > a && next < b)) next = 0.5 * (a + b);
    if (Math.abs(next - x) <= 4 * EPS * Math.abs(next) || b - a <= 4 * EPS * Math.abs(b)) return next;
    x = next;
  }
  return x;
}

/**
 * Student-t quantile: the t with P(T ≤ t) = p for `dof` degrees of freedom (dof may be fractional).
 * Closed forms for dof 1 and 2; otherwise the incomplete-beta tail inverted by safeguarded Newton steps.
 */
export function studentTQuantile(p: number, dof: number): number {
  if (!(p > 0 && p < 1) || !(dof > 0) || !Number.isFinite(dof)) {
    throw new RangeError(`studentTQuantile needs 0 < p < 1 and a positive finite dof (p=${p}, dof=${dof})`);
  }
  if (p === 0.5) return 0;
  const q = Math.min(p, 1 - p);
  let t: number;
  if (dof === 1) t = Math.tan(Math.PI * (0.5 - q));
  else if (dof === 2) t = Math.sqrt(2 / (4 * q * (1 - q)) - 2);
  else {
    const upperTail = (x: number) => 0.5 * incompleteBeta(dof / (dof + x * x), dof / 2, 0.5);
    t = invertUpperTail(upperTail, (x) => studentTPdf(x, dof), q, -lowerNormalQuantile(q), 0);
  }
  return p < 0.5 ? -t : t;
}

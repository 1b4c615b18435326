/**
 * Unit strings → dimension vectors, on a per-model mathjs instance (createUnit mutates the instance,
 * so one model's currencies never leak into another's).
 */
import { all, create, type FactoryFunctionMap, type MathJsInstance } from "./mathjs.js";

/** A fresh mathjs instance (about 3 ms): one per model, since createUnit mutates the instance. */
export function newMath(): MathJsInstance {
  return create(all as FactoryFunctionMap);
}

/** A parsed unit: exponents over mathjs base dimensions, the SI factor and the offset (°C, °F). */
export interface UnitInfo {
  readonly text: string;
  readonly dims: readonly number[];
  /** SI value of one of this unit, e.g. 1000 for t, 1/3600 for 1/h. */
  readonly scale: number;
  /** SI = scale * x + offset (273.15 for degC); 0 for every compound unit. */
  readonly offset: number;
}

const DIMENSIONLESS_TEXT = new Set(["1", "-", "dimensionless"]);
const NEW_BASE_UNIT = /^[A-Za-z][A-Za-z_]{0,31}$/;
/** SI symbols for mathjs' built-in base dimensions, used only to print dimensions in messages. */
const BASE_SYMBOLS: Readonly<Record<string, string>> = {
  MASS: "kg",
  LENGTH: "m",
  TIME: "s",
  CURRENT: "A",
  TEMPERATURE: "K",
  LUMINOUS_INTENSITY: "cd",
  AMOUNT_OF_SUBSTANCE: "mol",
  ANGLE: "rad",
  BIT: "bit",
};

/**
 * Parses a unit string; an unknown plain name (a currency such as USD) is registered as a new base unit.
 * Returns a reason string when the text cannot be understood.
 */
export function parseUnit(math: MathJsInstance, text: string): UnitInfo | string {
  const trimmed = text.trim();
  if (DIMENSIONLESS_TEXT.has(trimmed)) return { text, dims: [], scale: 1, offset: 0 };
  for (let attempt = 0; attempt < 8; attempt += 1) {
    try {
      const u = math.unit(1, trimmed);
      let scale = 1;
      let offset = 0;
      // biome-ignore lint/suspicious/noExplicitAny: mathjs types do not expose Unit.units entries.
      const parts = (u as any).units as {
        unit: { value: number; offset: number };
        prefix: { value: number };
        power: number;
      }[];
      for (const p of parts) scale *= (p.unit.value * p.prefix.value) ** p.power;
      // mathjs: SI = (x + offset) * value, so the SI-side offset is scale * offset.
      if (parts.length === 1 && parts[0]?.power === 1) offset = scale * parts[0].unit.offset;
      return { text, dims: [...u.dimensions], scale, offset };
    } catch (err) {
      const message = err instanceof Error ? err.message : String(err);
      const missing = /^Unit "([^"]+)" not found/.exec(message)?.[1];
      if (missing === undefined || !NEW_BASE_UNIT.test(missing)) return message;
      try {
        math.createUnit(missing);
      } catch (createErr) {
        return createErr instanceof Error ? createErr.message : String(createErr);
      }
    }
  }
  return `too many new base units in "${text}"`;
}

/** True when two dimension vectors are equal (shorter vectors are padded with zeros). */
export function sameDims(a: readonly number[], b: readonly number[]): boolean {
  const n = Math.max(a.length, b.length);
  for (let i = 0; i < n; i += 1) {
    if (Math.abs((a[i] ?? 0) - (b[i] ?? 0)) > 1e-12) return false;
  }
  return true;
}

/** True when every exponent is zero. */
export function isDimensionless(dims: readonly number[]): boolean {
  return dims.every((d) => Math.abs(d) < 1e-12);
}

/** True when two SI factors agree to 1e-9 relative. */
export function sameScale(a: number, b: number): boolean {
  return Math.abs(a - b) <= 1e-9 * Math.max(Math.abs(a), Math.abs(b));
}

/** Prints a dimension vector in SI base symbols, e.g. "kg s^-1", for messages. */
export function formatDims(math: MathJsInstance, dims: readonly number[]): string {
  // biome-ignore lint/suspicious/noExplicitAny: BASE_DIMENSIONS is untyped in mathjs' declarations.
  const names = ((math as any).Unit?.BASE_DIMENSIONS ?? []) as string[];
  const parts: string[] = [];
  dims.forEach((p, i) => {
    if (Math.abs(p) < 1e-12) return;
    const name = names[i] ?? `dim${i}`;
    const symbol = BASE_SYMBOLS[name] ?? name.replace(/_STUFF$/, "");
    parts.push(p === 1 ? symbol : `${symbol}^${Number(p.toFixed(6))}`);
  });
  return parts.length === 0 ? "dimensionless" : parts.join(" ");
}

/**
 * The affine map from values in unit `from` to values in unit `to` (same dimension):
 * to = scale * from + offset. Handles °C/°F/K offsets.
 */
export function affineConversion(from: UnitInfo, to: UnitInfo): { scale: number; offset: number } {
  // SI = from.scale * x + from.offset; y = (SI - to.offset) / to.scale
  const scale = from.scale / to.scale;
  const offset = (from.offset - to.offset) / to.scale;
  return { scale, offset };
}

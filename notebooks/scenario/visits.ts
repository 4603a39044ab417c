/**
 * The demo scenario: clinic visit records of an invented regional community health cooperative.
 * Every person, district and number here is made up. The structure is planted so that the demo
 * notebooks find something: waits differ by district and rise in winter, costs differ by visit
 * reason, the mix of reasons moves with age, respiratory visits peak in winter.
 *
 * Deterministic: the same seed gives the same bytes (see test/demo/generate.test.ts). The files the
 * demo needs (CSV, key, policy) are written by ensureDemoData in generate.ts.
 */
import { DemoRandom } from "./prng.js";

export const DEFAULT_SEED = 20250101;
export const DEFAULT_PATIENTS = 60_000;
export const DEFAULT_VISITS = 200_000;

export const DISTRICTS = ["Northgate", "Riverside", "Elmstead", "Harrow Vale", "Kestrel Point", "Saltmarsh"] as const;
const DISTRICT_WEIGHTS = [22, 20, 16, 14, 15, 13];
/** Typical wait in minutes per district: the planted answer to "where do people wait longest?". */
const DISTRICT_WAIT = [24, 31, 17, 42, 21, 56];

export const REASONS = [
  "checkup",
  "respiratory",
  "injury",
  "chronic care",
  "maternity",
  "mental health",
  "dental",
  "vaccination",
] as const;
/** Typical cost per reason (currency units), and how much waiting a reason adds or saves. */
const REASON_COST = [62, 95, 240, 155, 340, 130, 115, 38];
const REASON_WAIT = [0.9, 1.1, 1.25, 0.85, 0.8, 1.0, 0.95, 0.55];

export const INSURANCE = ["public", "private", "member plan", "none"] as const;
export const SEXES = ["female", "male"] as const;

export const CSV_HEADER = "patient_id,visit_date,age,sex,district,insurance,visit_reason,wait_minutes,cost";

interface Patient {
  id: string;
  age: number;
  sex: number;
  district: number;
  insurance: number;
  chronic: boolean;
}

export interface GenerateOptions {
  seed?: number;
  patients?: number;
  visits?: number;
}

function makePatient(rng: DemoRandom, index: number): Patient {
  const band = rng.pick([21, 57, 22]); // children, working age, 65+
  const age = band === 0 ? rng.int(0, 17) : band === 1 ? rng.int(18, 64) : Math.min(100, 65 + Math.floor(rng.gamma(1.6) * 8));
  const sex = rng.pick([51, 49]);
  const district = rng.pick(DISTRICT_WEIGHTS);
  // Older members lean on the public scheme; Saltmarsh (the poorest district here) has more uninsured.
  const none = district === 5 ? 16 : 7;
  const insurance =
    age >= 65 ? rng.pick([70, 12, 15, none / 2]) : age < 18 ? rng.pick([45, 30, 20, none / 2]) : rng.pick([25, 36, 30, none]);
  const chronic = rng.uniform() < 0.04 + age / 160;
  return { id: `P${String(index + 1).padStart(6, "0")}`, age, sex, district, insurance, chronic };
}

/** Visits per patient: at least one, more with age and chronic illness, then nudged to the exact total. */
function visitCounts(rng: DemoRandom, patients: Patient[], total: number): number[] {
  const counts = patients.map((p) => {
    // 1 + a geometric number of return visits with this mean, truncated at 24.
    const mean = 0.7 + p.age / 58 + (p.chronic ? 3 : 0);
    let n = 1;
    while (n < 24 && rng.uniform() < mean / (mean + 1)) n++;
    return n;
  });
  let sum = counts.reduce((a, b) => a + b, 0);
  while (sum !== total) {
    const i = rng.int(0, counts.length - 1);
    if (sum > total && counts[i] > 1) {
      counts[i]--;
      sum--;
    } else if (sum < total && counts[i] < 24) {
      counts[i]++;
      sum++;
    }
  }
  return counts;
}

function reasonWeights(p: Patient): number[] {
  const child = p.age < 18;
  const old = p.age >= 65;
  const fertile = p.sex === 0 && p.age >= 16 && p.age <= 45;
  return [
    child ? 22 : 18, // checkup
    child ? 20 : old ? 18 : 13, // respiratory
    child ? 16 : old ? 6 : 13, // injury
    (p.chronic ? 40 : 2) + (old ? 10 : 0), // chronic care
    fertile ? 9 : 0, // maternity
    child ? 4 : old ? 5 : 11, // mental health
    child ? 9 : 8, // dental
    child ? 14 : old ? 10 : 3, // vaccination
  ];
}

/** Day of 2025 (0-based); respiratory visits and vaccinations cluster in the cold months. */
function visitDay(rng: DemoRandom, reason: number): number {
  const seasonal = reason === 1 ? 0.75 : reason === 7 ? 0.5 : 0.1;
  for (;;) {
    const day = rng.int(0, 364);
    const winter = Math.cos((2 * Math.PI * (day - 15)) / 365); // peaks mid-January
    if (rng.uniform() * (1 + seasonal) < 1 + seasonal * winter) return day;
  }
}

const MONTH_STARTS = [0, 31, 59, 90, 120, 151, 181, 212, 243, 273, 304, 334, 365];
function isoDate(day: number): string {
  let m = 0;
  while (MONTH_STARTS[m + 1] <= day) m++;
  return `2025-${String(m + 1).padStart(2, "0")}-${String(day - MONTH_STARTS[m] + 1).padStart(2, "0")}`;
}

/** Shows a half-minute wait without float noise in the text: 23.5 -> "23.5", 23 -> "23". */
function halfSteps(x: number): string {
  const h = Math.round(x * 2);
  return h % 2 === 0 ? String(h / 2) : `${(h - 1) / 2}.5`;
}

function cents(x: number): string {
  const c = Math.round(x * 100);
  return `${Math.floor(c / 100)}.${String(c % 100).padStart(2, "0")}`;
}

/** The whole CSV text, header first, one line per visit, "\n" line ends. */
export function generateVisitsCsv(opts: GenerateOptions = {}): string {
  const rng = new DemoRandom(opts.seed ?? DEFAULT_SEED);
  const nPatients = opts.patients ?? DEFAULT_PATIENTS;
  const nVisits = opts.visits ?? DEFAULT_VISITS;
  if (nVisits < nPatients) throw new RangeError("demo data: every patient has at least one visit, so visits >= patients");
  const patients = Array.from({ length: nPatients }, (_, i) => makePatient(rng, i));
  const counts = visitCounts(rng, patients, nVisits);
  const lines: string[] = [CSV_HEADER];
  for (let i = 0; i < patients.length; i++) {
    const p = patients[i];
    const weights = reasonWeights(p);
    for (let k = 0; k < counts[i]; k++) {
      const reason = rng.pick(weights);
      const day = visitDay(rng, reason);
      const winterLoad = 1 + 0.18 * Math.max(0, Math.cos((2 * Math.PI * (day - 15)) / 365));
      // Gamma(2) keeps waits positive and right-skewed, as queues are; a few exceed the
      // steward's declared bound of 240 minutes and get clamped by the curator.
      const wait = Math.min(420, (DISTRICT_WAIT[p.district] * REASON_WAIT[reason] * winterLoad * rng.gamma(2)) / 2);
      const uninsuredDiscount = p.insurance === 3 ? 0.8 : 1;
      const cost = REASON_COST[reason] * uninsuredDiscount * Math.exp(0.45 * rng.normal() - 0.1) * (1 + p.age / 400);
      lines.push(
        [
          p.id,
          isoDate(day),
          String(p.age),
          SEXES[p.sex],
          DISTRICTS[p.district],
          INSURANCE[p.insurance],
          REASONS[reason],
          halfSteps(wait),
          cents(Math.min(cost, 4000)),
        ].join(","),
      );
    }
  }
  return `${lines.join("\n")}\n`;
}

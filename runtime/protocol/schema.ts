/**
 * Strict runtime validation of the messages in messages.ts (zod). Shared by both sides, so it
 * imports nothing from the curator. Checks here are structural only: they do not know any
 * dataset's schema. Unknown keys are refused everywhere, so a typo never silently changes a plan.
 *
 * Error messages name the path inside the message and what is wrong, never echo a value.
 */
import { z } from "zod";
import { BadInputError, ProtocolError } from "../errors.js";
import { PLAN_LIMITS, PRIVACY_LIMITS } from "./limits.js";
import { CELL_DIGEST_PATTERN } from "./cell-source.js";
import { PROTOCOL_VERSION, type QueryPlan, type Request } from "./messages.js";

/** Exact privacy parameter as sent: a decimal ("0.1", "1e-6") or a fraction ("1/3"). */
const D = `\\d{1,${PRIVACY_LIMITS.maxDigits}}`;
const EXACT = new RegExp(`^(?:${D}(?:\\.${D})?(?:[eE][+-]?\\d{1,2})?|${D}\\/${D})$`);

function isPositiveExact(s: string): boolean {
  if (!EXACT.test(s)) return false;
  if (s.includes("/")) {
    const [a, b] = s.split("/");
    return /[1-9]/.test(a) && /[1-9]/.test(b);
  }
  const mantissa = s.split(/[eE]/)[0];
  return /[1-9]/.test(mantissa);
}

const exactPositive = z
  .string({ error: "must be a string holding an exact positive number such as \"0.5\" or \"1/3\"" })
  .refine(isPositiveExact, {
    message: `must be an exact positive number written as a decimal ("0.5", "1e-3") or a fraction ("1/3"), at most ${PRIVACY_LIMITS.maxDigits} digits in each part`,
  });

const name = z
  .string({ error: "must be a string" })
  .min(1, { message: "must not be empty" })
  .max(PLAN_LIMITS.maxStringLength, { message: `must be at most ${PLAN_LIMITS.maxStringLength} characters` });

const finiteNumber = z.number({ error: "must be a finite number" }).refine(Number.isFinite, { message: "must be a finite number" });

const literal = z.union([z.string().max(PLAN_LIMITS.maxStringLength), finiteNumber, z.boolean()], {
  error: `must be a string (at most ${PLAN_LIMITS.maxStringLength} characters), a finite number or a boolean`,
});

// Range checks on binary64 inputs compare with the binary64 nearest each stated limit.
const confidence = finiteNumber.refine((c) => c >= Number(PRIVACY_LIMITS.minConfidence) && c <= Number(PRIVACY_LIMITS.maxConfidence), {
  message: `must lie between ${PRIVACY_LIMITS.minConfidence} and ${PRIVACY_LIMITS.maxConfidence} (the confidences the curator supports)`,
});

type ConditionShape = QueryPlan["where"];

const condition: z.ZodType<NonNullable<ConditionShape>> = z.lazy(() =>
  z.discriminatedUnion(
    "op",
    [
      z.strictObject({ op: z.literal(["eq", "ne", "lt", "le", "gt", "ge"]), column: name, value: literal }),
      z.strictObject({
        op: z.literal("in"),
        column: name,
        values: z
          .array(literal, { error: "must be a list" })
          .min(1, { message: "must list at least one value" })
          .max(PLAN_LIMITS.maxInValues, { message: `must list at most ${PLAN_LIMITS.maxInValues} values` }),
      }),
      z.strictObject({ op: z.literal("between"), column: name, low: literal, high: literal }),
      z.strictObject({ op: z.literal("isNull"), column: name }),
      z.strictObject({
        op: z.literal(["and", "or"]),
        of: z.array(condition, { error: "must be a list of conditions" }).min(1, { message: "must hold at least one condition" }),
      }),
      z.strictObject({ op: z.literal("not"), of: condition }),
    ],
    { error: "must have op one of eq, ne, lt, le, gt, ge, in, between, isNull, and, or, not" },
  ),
);

const bins = z
  .number({ error: "must be a whole number" })
  .int({ message: "must be a whole number" })
  .min(1, { message: "must be at least 1" })
  .max(PLAN_LIMITS.maxBins, { message: `must be at most ${PLAN_LIMITS.maxBins}` });

const groupKey = z.union(
  [z.strictObject({ column: name }), z.strictObject({ column: name, bins })],
  { error: `must be { column } or { column, bins } with bins a whole number from 1 to ${PLAN_LIMITS.maxBins}` },
);

const probability = finiteNumber
  .refine((p) => p > 0 && p < 1, { message: "must lie strictly between 0 and 1" })
  // p = a/b sets the quantile's sensitivity max(a, b - a): more digits only add noise and work.
  .refine((p) => Number(p.toFixed(PRIVACY_LIMITS.maxProbabilityDigits)) === p, {
    message: `must have at most ${PRIVACY_LIMITS.maxProbabilityDigits} decimal places (such as 0.25 or 0.999)`,
  });

const measure = z.discriminatedUnion(
  "kind",
  [
    z.strictObject({ kind: z.literal("count") }),
    z.strictObject({ kind: z.literal(["sum", "mean", "variance", "std"]), column: name }),
    z.strictObject({
      kind: z.literal("quantile"),
      column: name,
      p: z
        .array(probability, { error: "must be a list of probabilities" })
        .min(1, { message: "must list at least one probability" })
        .max(PLAN_LIMITS.maxQuantiles, { message: `must list at most ${PLAN_LIMITS.maxQuantiles} probabilities` }),
    }),
    z.strictObject({ kind: z.literal("histogram"), column: name, bins }),
    z.strictObject({ kind: z.literal("crosstab"), rows: name, cols: name }),
    z.strictObject({ kind: z.literal("describe"), clamped: z.boolean({ error: "must be true or false" }).optional() }),
    z.strictObject({
      kind: z.literal("clamped"),
      columns: z
        .array(name, { error: "must be a list of column names" })
        .min(1, { message: "must list at least one column" })
        .max(PLAN_LIMITS.maxClampedColumns, { message: `must list at most ${PLAN_LIMITS.maxClampedColumns} columns` }),
    }),
    z.strictObject({
      kind: z.literal("regression"),
      response: name,
      // The intercept takes one design column; the rest of the limit is checked against the policy
      // (category levels) at prepare time, before any work or spend.
      predictors: z
        .array(name, { error: "must be a list of column names" })
        .min(1, { message: "must list at least one predictor" })
        .max(PLAN_LIMITS.maxDesignColumns - 1, { message: `must list at most ${PLAN_LIMITS.maxDesignColumns - 1} predictors (maxDesignColumns ${PLAN_LIMITS.maxDesignColumns} includes the intercept)` }),
      reference: z
        .array(z.strictObject({ column: name, value: z.string({ error: "must be a string" }).max(PLAN_LIMITS.maxStringLength) }), { error: "must be a list of { column, value }" })
        .max(PLAN_LIMITS.maxDesignColumns - 1, { message: `must list at most ${PLAN_LIMITS.maxDesignColumns - 1} reference levels` })
        .optional(),
    }),
    z.strictObject({
      kind: z.literal("correlation"),
      columns: z
        .array(name, { error: "must be a list of column names" })
        .min(2, { message: "must list at least two columns" })
        .max(PLAN_LIMITS.maxCorrelationColumns, { message: `must list at most ${PLAN_LIMITS.maxCorrelationColumns} columns (maxCorrelationColumns)` }),
    }),
  ],
  { error: "must have kind one of count, sum, mean, variance, std, quantile, histogram, crosstab, describe, regression, correlation, clamped" },
);

const privacy = z.union(
  [
    z.strictObject({ epsilon: exactPositive }),
    z.strictObject({ rho: exactPositive }),
    z.strictObject({
      within: finiteNumber
        .refine((h) => h > 0, { message: "must be a positive number" })
        .refine((h) => h >= Number(PRIVACY_LIMITS.minWithin) && h <= Number(PRIVACY_LIMITS.maxWithin), {
          message: `must lie between ${PRIVACY_LIMITS.minWithin} and ${PRIVACY_LIMITS.maxWithin} (the range the curator supports)`,
        }),
      confidence: confidence.optional(),
      atMost: exactPositive.optional(),
    }),
  ],
  { error: "must be { epsilon: \"...\" }, { rho: \"...\" } or { within: <number>, confidence?: <number>, atMost?: \"...\" } with exact positive strings for epsilon, rho and atMost" },
);

const planSchema = z.strictObject({
  v: z.literal(PROTOCOL_VERSION, { error: `must be ${PROTOCOL_VERSION}` }),
  dataset: name,
  where: condition.optional(),
  groupBy: z
    .array(groupKey, { error: "must be a list" })
    .min(1, { message: "must list at least one key (or be left out)" })
    .max(PLAN_LIMITS.maxGroupKeys, { message: `must list at most ${PLAN_LIMITS.maxGroupKeys} keys` })
    .optional(),
  measure,
  privacy,
  confidence: confidence.optional(),
});

const body = z.discriminatedUnion(
  "op",
  [
    z.strictObject({ op: z.literal("catalogue") }),
    z.strictObject({ op: z.literal("open"), dataset: name }),
    z.strictObject({
      op: z.literal("ask"),
      plan: z.unknown(),
      // The asking cell's source digest (cell-source.ts); optional: scripts outside a notebook have no cell.
      cell: z.string({ error: "must be a string" }).regex(CELL_DIGEST_PATTERN, { message: "must be 64 lowercase hex digits (sha256 of the cell's source)" }).optional(),
    }),
    z.strictObject({
      op: z.literal("preview"),
      plan: z.unknown(),
      assumeCount: z.number({ error: "must be a whole number" }).int({ message: "must be a whole number" }).min(1, { message: "must be at least 1" }).max(1e15, { message: "must be at most 1e15" }).optional(),
    }),
    z.strictObject({ op: z.literal("spend"), dataset: name }),
    z.strictObject({
      op: z.literal("ledger"),
      dataset: name.optional(),
      before: z.number({ error: "must be a whole number" }).int({ message: "must be a whole number" }).min(1, { message: "must be at least 1" }).max(Number.MAX_SAFE_INTEGER, { message: "is too large" }).optional(),
    }),
    z.strictObject({ op: z.literal("accounts") }),
  ],
  { error: "must have op one of catalogue, open, ask, preview, spend, ledger" },
);

const requestSchema = z.strictObject({
  v: z.literal(PROTOCOL_VERSION, { error: `must be protocol version ${PROTOCOL_VERSION}` }),
  id: z.string({ error: "must be a string" }).min(1, { message: "must not be empty" }).max(128, { message: "must be at most 128 characters" }),
  analyst: z.string({ error: "must be a string" }).min(1, { message: "must not be empty" }).max(64, { message: "must be at most 64 characters" }),
  token: z.string({ error: "must be a string" }).min(1, { message: "must not be empty" }).max(1024, { message: "must be at most 1024 characters" }),
  body,
});

/** "plan.where.of[0].value" from a zod path. */
export function formatPath(root: string, path: readonly PropertyKey[]): string {
  let out = root;
  for (const p of path) out += typeof p === "number" ? `[${p}]` : `.${String(p).slice(0, 40)}`;
  return out;
}

function describeIssues(root: string, error: z.ZodError): string {
  const shown = error.issues.slice(0, 3).map((issue) => {
    let msg = issue.message;
    if (issue.code === "unrecognized_keys") {
      const keys = issue.keys.map((k) => JSON.stringify(k.slice(0, 40))).join(", ");
      msg = `unknown key${issue.keys.length > 1 ? "s" : ""} ${keys} (only the documented keys are accepted)`;
    } else if (issue.code === "invalid_type" && issue.expected === "object") {
      msg = "must be an object";
    } else if (issue.code === "invalid_type" && issue.expected === "number") {
      msg = "must be a finite number";
    }
    return `${formatPath(root, issue.path)}: ${msg}`;
  });
  const more = error.issues.length > 3 ? ` (and ${error.issues.length - 3} more problems)` : "";
  return shown.join("; ") + more;
}

/** Depth and size of a condition tree, checked before zod so a hostile nesting cannot exhaust the stack. */
function checkConditionSize(raw: unknown, root: string): void {
  let nodes = 0;
  let values = 0;
  const walk = (node: unknown, depth: number, path: string): void => {
    if (depth > PLAN_LIMITS.maxDepth) throw new BadInputError(`${path}: conditions nest deeper than ${PLAN_LIMITS.maxDepth} levels`);
    if (++nodes > PLAN_LIMITS.maxConditions)
      throw new BadInputError(`${root}.where: more than ${PLAN_LIMITS.maxConditions} conditions`);
    if (node === null || typeof node !== "object") return;
    const list = (node as { values?: unknown }).values;
    if (Array.isArray(list) && (values += list.length) > PLAN_LIMITS.maxInValuesTotal) {
      throw new BadInputError(`${root}.where: more than ${PLAN_LIMITS.maxInValuesTotal} listed values in all (limit maxInValuesTotal)`);
    }
    const of = (node as { of?: unknown }).of;
    if (Array.isArray(of)) of.forEach((child, i) => walk(child, depth + 1, `${path}.of[${i}]`));
    else if (of !== undefined) walk(of, depth + 1, `${path}.of`);
  };
  walk(raw, 1, `${root}.where`);
}

/** Validates the structure of a query plan (schema-independent). Throws BadInputError naming the path. */
export function parsePlan(raw: unknown): QueryPlan {
  return parsePlanAt(raw, "plan");
}

function parsePlanAt(raw: unknown, root: string): QueryPlan {
  if (raw !== null && typeof raw === "object" && !Array.isArray(raw) && "where" in raw) {
    checkConditionSize((raw as { where: unknown }).where, root);
  }
  const r = planSchema.safeParse(raw);
  if (!r.success) throw new BadInputError(`invalid query plan: ${describeIssues(root, r.error)}`);
  return r.data as QueryPlan;
}

/**
 * Validates a request envelope. Envelope problems are ProtocolErrors; problems inside an ask or
 * preview plan are BadInputErrors (the analyst's query is wrong, not the client).
 */
export function parseRequest(raw: unknown): Request {
  const r = requestSchema.safeParse(raw);
  if (!r.success) throw new ProtocolError(`invalid request: ${describeIssues("request", r.error)}`);
  const req = r.data;
  if (req.body.op === "ask") {
    const plan = parsePlanAt(req.body.plan, "request.body.plan");
    const cell = req.body.cell;
    return { ...req, body: { op: "ask", plan, ...(cell !== undefined ? { cell } : {}) } } as Request;
  }
  if (req.body.op === "preview") {
    const plan = parsePlanAt(req.body.plan, "request.body.plan");
    const assumeCount = req.body.assumeCount;
    return { ...req, body: { op: "preview", plan, ...(assumeCount !== undefined ? { assumeCount } : {}) } } as Request;
  }
  return req as Request;
}

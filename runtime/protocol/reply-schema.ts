/**
 * Strict runtime validation of every curator reply (zod), mirroring the Response types in
 * messages.ts. Shared side: it imports nothing from the curator. The client checks each reply
 * against it before a cell sees it, so a malformed reply fails the request at once instead of
 * breaking later in the display.
 *
 * Unknown keys are refused everywhere. Exact numbers must be in a form the display reads
 * (protocol/format.ts): a decimal with an exponent of at most 400, or a fraction with a non-zero
 * denominator. The type checks at the end of this file make the build fail if a schema and its
 * TypeScript type drift apart: a field added to a type (say `population` on SpendSummary or
 * Receipt) is one line here, next to its neighbours.
 *
 * Error messages name the path inside the reply and what is wrong, never a value from it.
 */
import { z } from "zod";
import type { HushErrorKind } from "../errors.js";
import {
  PROTOCOL_VERSION,
  type ColumnInfo,
  type DatasetInfo,
  type LedgerEntry,
  type MechanismRecord,
  type Preview,
  type QueryPlan,
  type Reasked,
  type Receipt,
  type Release,
  type ReleaseRow,
  type Response,
  type ResponseBody,
  type SpendSummary,
} from "./messages.js";
import { formatPath, parsePlan } from "./schema.js";

/**
 * Largest reply frame the client reads. A ledger reply holds up to LEDGER_PAGE receipts per
 * population, so this is far above a request's limit; larger frames are refused without being parsed.
 */
export const MAX_REPLY_BYTES = 32 * 1024 * 1024;

/** Largest exponent the display expands (protocol/format.ts refuses larger ones). */
const MAX_EXPONENT = 400;
const DECIMAL = /^-?\d+(?:\.\d+)?(?:[eE]([+-]?\d+))?$/;
const FRACTION = /^-?\d+\/\d*[1-9]\d*$/;

function isExact(s: string): boolean {
  if (FRACTION.test(s)) return true;
  const m = DECIMAL.exec(s);
  return m !== null && (m[1] === undefined || Math.abs(Number(m[1])) <= MAX_EXPONENT);
}

/** An exact number as the curator writes it: "12", "-0.5", "1e-7", "1/3". */
const exact = z.string().refine(isExact, {
  message: `must be an exact number written as a decimal (exponent at most ${MAX_EXPONENT}) or a fraction`,
});
const wholeText = z.string().regex(/^\d+$/, { message: "must be a whole number written in digits" });
const hex64 = z.string().regex(/^[0-9a-f]{64}$/, { message: "must be 64 lowercase hex digits" });
const base64 = z.string().regex(/^[A-Za-z0-9+/]+={0,2}$/, { message: "must be base64 text" });
const timestamp = z
  .string()
  .regex(/^\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}(?:\.\d+)?Z$/, { message: "must be an ISO 8601 UTC timestamp" });
const isoDate = z.string().regex(/^\d{4}-\d{2}-\d{2}$/, { message: "must be a date written YYYY-MM-DD" });
const count = z.number().int().nonnegative().max(Number.MAX_SAFE_INTEGER);
const position = z.number().int().min(1).max(Number.MAX_SAFE_INTEGER);
const confidence = z.number().gt(0, { message: "must lie strictly between 0 and 1" }).lt(1, { message: "must lie strictly between 0 and 1" });
const accountingUnit = z.enum(["epsilon", "rho"]);

/** A plan echoed back (release, ledger) is held to the same structural rules as a plan sent. */
const queryPlan = z.unknown().transform((raw, ctx): QueryPlan => {
  try {
    return parsePlan(raw);
  } catch {
    // parsePlan throws a BadInputError whose message names keys it was sent; a reply problem is
    // reported here instead, without echoing anything the reply held.
    ctx.addIssue({ code: "custom", message: "is not a valid query plan", input: raw });
    return z.NEVER;
  }
});

const spendSummary = z.strictObject({
  analyst: z.string(),
  dataset: z.string(),
  population: z.string(),
  mode: z.enum(["pure", "zcdp"]),
  spentEpsilon: exact,
  capEpsilon: exact,
  remainingEpsilon: exact,
  spentRho: exact.optional(),
  capRho: exact.optional(),
  remainingRho: exact.optional(),
  delta: exact.optional(),
  epsilonBy: z.enum(["plain composition", "zCDP conversion"]).optional(),
  releases: count,
});

const columnInfo = z.discriminatedUnion("type", [
  z.strictObject({ name: z.string(), type: z.enum(["integer", "number"]), lower: exact, upper: exact, step: exact }),
  z.strictObject({ name: z.string(), type: z.literal("category"), values: z.array(z.string()) }),
  z.strictObject({ name: z.string(), type: z.literal("date"), lower: isoDate, upper: isoDate }),
  z.strictObject({ name: z.string(), type: z.literal("boolean") }),
]);

const datasetInfo = z.strictObject({
  name: z.string(),
  description: z.string(),
  columns: z.array(columnInfo),
  unit: z.strictObject({ column: z.string().nullable(), maxRows: position, maxGroups: position }),
  spend: spendSummary,
});

const releaseRow = z.strictObject({
  key: z.array(z.string().nullable()),
  stat: z.string(),
  column: z.string().nullable(),
  value: exact.nullable(),
  low: exact.nullable(),
  high: exact.nullable(),
});

const mechanismRecord = z.strictObject({
  target: z.string(),
  family: z.enum(["discrete-laplace", "discrete-gaussian", "exponential"]),
  scale: exact,
  sensitivity: wholeText,
  step: exact,
  cost: exact,
});

const receipt = z.strictObject({
  format: z.literal("hush-receipt/1"),
  analyst: z.string(),
  dataset: z.string(),
  population: z.string(),
  seq: position,
  digest: hex64,
  cell: hex64.optional(),
  unit: accountingUnit,
  cost: exact,
  total: exact,
  cap: exact,
  delta: exact.optional(),
  result: z.array(
    z.tuple([z.array(z.string().nullable()), z.string(), z.string().nullable(), exact.nullable(), exact.nullable(), exact.nullable()]),
  ),
  mechanisms: z.array(mechanismRecord),
  issuedAt: timestamp,
  prev: hex64,
  keyId: z.string().regex(/^[0-9a-f]{16}$/, { message: "must be 16 lowercase hex digits" }),
  sig: base64,
});

const reasked = z.strictObject({
  format: z.literal("hush-reasked/1"),
  receipt: hex64,
  cell: hex64,
  keyId: z.string().regex(/^[0-9a-f]{16}$/, { message: "must be 16 lowercase hex digits" }),
  sig: base64,
});

const release = z.strictObject({
  dataset: z.string(),
  digest: hex64,
  plan: queryPlan,
  groupColumns: z.array(z.string()),
  rows: z.array(releaseRow),
  confidence,
  intervalMethod: z.string(),
  noiseOnly: z.literal(true),
  mechanisms: z.array(mechanismRecord),
  cost: exact,
  spend: spendSummary,
  replay: z.boolean(),
  receipt,
  reasked: reasked.optional(),
  notes: z.array(z.string()),
});

const preview = z.strictObject({
  dataset: z.string(),
  digest: hex64,
  cost: exact,
  unit: accountingUnit,
  halfWidths: z.array(z.strictObject({ stat: z.string(), column: z.string().nullable(), halfWidth: exact })),
  confidence,
  affordable: z.boolean(),
  replay: z.boolean(),
  spend: spendSummary,
  notes: z.array(z.string()),
  ratioErrors: z
    .array(
      z.strictObject({
        stat: z.literal(["mean", "variance", "std"]),
        column: z.string(),
        assumedCount: z.number().int().min(1),
        assumedFrom: z.literal(["analyst", "policy"]),
        typical: exact,
        typicalAt: z.string(),
        widest: exact,
      }),
    )
    .optional(),
});

const ledgerEntry = z.strictObject({
  seq: position,
  dataset: z.string(),
  population: z.string(),
  digest: hex64,
  plan: queryPlan,
  cost: exact,
  total: exact,
  issuedAt: timestamp,
  receipt,
});

const responseBody = z.discriminatedUnion("op", [
  z.strictObject({
    op: z.literal("catalogue"),
    datasets: z.array(z.strictObject({ name: z.string(), description: z.string() })),
    publicKey: base64,
  }),
  z.strictObject({ op: z.literal("open"), info: datasetInfo }),
  z.strictObject({ op: z.literal("ask"), release }),
  z.strictObject({ op: z.literal("preview"), preview }),
  z.strictObject({ op: z.literal("spend"), spend: spendSummary }),
  z.strictObject({ op: z.literal("ledger"), entries: z.array(ledgerEntry), earlier: position.optional() }),
  z.strictObject({ op: z.literal("accounts"), accounts: z.array(spendSummary) }),
]);

/** Every HushErrorKind, listed once at run time (the check below keeps it complete). */
export const ERROR_KINDS = [
  "bad-input",
  "policy",
  "over-cap",
  "unauthorized",
  "unknown-dataset",
  "protocol",
  "unreachable",
  "busy",
  "internal",
] as const satisfies readonly HushErrorKind[];

const replyError = z.strictObject({
  kind: z.enum(ERROR_KINDS),
  message: z.string(),
  spend: spendSummary.optional(),
});

const version = z.literal(PROTOCOL_VERSION);

/** A whole reply envelope: `{ v, id, ok: true, body }` or `{ v, id, ok: false, error }`. */
export const responseSchema = z.discriminatedUnion("ok", [
  z.strictObject({ v: version, id: z.string(), ok: z.literal(true), body: responseBody }),
  z.strictObject({ v: version, id: z.string(), ok: z.literal(false), error: replyError }),
]);

/** "reply.body.spend.spentEpsilon: must be ..." for the first few problems; never a value. */
export function describeReplyIssues(error: z.ZodError): string {
  const shown = error.issues.slice(0, 3).map((issue) => {
    const msg = issue.code === "unrecognized_keys" ? "has keys the protocol does not define" : issue.message;
    return `${formatPath("reply", issue.path)}: ${msg}`;
  });
  const more = error.issues.length > 3 ? ` (and ${error.issues.length - 3} more problems)` : "";
  return shown.join("; ") + more;
}

// ---------------------------------------------------------------------------------------------
// Drift checks: the build fails unless each schema's output is exactly the type in messages.ts.
// ---------------------------------------------------------------------------------------------

/** True only for identical types (the usual generic-function identity test). */
type Same<A, B> = (<T>() => T extends A ? 1 : 2) extends <T>() => T extends B ? 1 : 2 ? true : false;
type Holds<T extends true> = T;

export type ReplySchemaMatchesTypes = [
  Holds<Same<z.output<typeof spendSummary>, SpendSummary>>,
  Holds<Same<z.output<typeof columnInfo>, ColumnInfo>>,
  Holds<Same<z.output<typeof datasetInfo>, DatasetInfo>>,
  Holds<Same<z.output<typeof releaseRow>, ReleaseRow>>,
  Holds<Same<z.output<typeof mechanismRecord>, MechanismRecord>>,
  Holds<Same<z.output<typeof receipt>, Receipt>>,
  Holds<Same<z.output<typeof reasked>, Reasked>>,
  Holds<Same<z.output<typeof release>, Release>>,
  Holds<Same<z.output<typeof preview>, Preview>>,
  Holds<Same<z.output<typeof ledgerEntry>, LedgerEntry>>,
  Holds<Same<z.output<typeof responseBody>, ResponseBody>>,
  Holds<Same<z.output<typeof responseSchema>, Response>>,
  Holds<Same<(typeof ERROR_KINDS)[number], HushErrorKind>>,
];

/**
 * The cell API: what TypeScript cells use through the `hush` global. Talks only to runtime/client.
 */
export { Hush, HUSH_HELP } from "./hush.js";
export { SealedTable, CostPreview, columnText } from "./table.js";
export { Aggregates, type HistogramOptions, type PreviewOptions } from "./aggregates.js";
export { Answer, type ResultRow } from "./answer.js";
export { CostQuote, type ExpectedError } from "./quote.js";
export { BudgetReport, LedgerView, type DatasetBudget } from "./budget.js";
export { SessionSpend, type QueryRecord } from "./session-spend.js";
export { Filter, Column, col, toCondition, conditionText, checkAgainstSchema, type FilterInput, type FilterObject, type ColumnTest } from "./expr.js";
export { type ExactNumber, type PrivacyAmount, type SpendOptions, type EpsilonSpend, type RhoSpend, type AccuracySpend, exactPositive, plainDecimal, privacyAsk, DEFAULT_CONFIDENCE } from "./privacy.js";
export { resolveConfig, type HushConfig } from "./config.js";
export { Connector, embeddedNotice, type ConnectDeps, type Connection, type DemoSetup } from "./connection.js";
export { type ApiContext, type CuratorPort, withBudgetNote } from "./context.js";
export * as text from "./text.js";

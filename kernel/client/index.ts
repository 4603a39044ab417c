/** A small Jupyter client for the hush kernel (tests, bench, `hush run`). */
export { KernelProcess } from "./kernel-process.js";
export { kernelMainScript } from "../kernelspec.js";
export type { StartOptions, ExecuteOptions, ExecuteResult, RoundTrip, NbOutput } from "./kernel-process.js";
export { OutputCollector } from "./outputs.js";
export { writeConnectionFile, freePorts } from "./connection-file.js";

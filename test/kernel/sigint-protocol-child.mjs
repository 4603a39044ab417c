// Child process for interrupt-target.test.ts: runs numbered "cells" through the built
// interrupt-target module (dist/, built by `npx tsc -p .`) on the main thread, while a worker
// thread keeps interrupting whichever cell runs. Prints one JSON line with what happened.
//
// argv: mode ("marked": the kernel's rule, a SIGINT only while IN_VM names the cell, swapped under
// compare-and-swap; "running": the old rule, a SIGINT whenever a cell runs), duration in ms.
import vm from "node:vm";
import { Worker } from "node:worker_threads";

const mode = process.argv[2];
const durationMs = Number(process.argv[3] ?? "2000");
const moduleUrl = new URL("../../dist/kernel/interrupt-target.js", import.meta.url).href;
const { beginCell, endCell, armVm, disarmVm, markedScript, installVmMark, interruptState } = await import(moduleUrl);

let heard = 0;
process.on("SIGINT", () => {
  heard += 1;
});
installVmMark();

const stop = new Int32Array(new SharedArrayBuffer(4));
const worker = new Worker(
  `
  const { workerData, parentPort } = require("node:worker_threads");
  (async () => {
    const { InterruptSender } = await import(workerData.moduleUrl);
    const stop = workerData.stop;
    const pause = new Int32Array(new SharedArrayBuffer(4));
    const signalled = [];
    let target = 0;
    const sender = new InterruptSender(workerData.state, () => {
      signalled.push(target);
      process.kill(process.pid, "SIGINT");
    });
    let rounds = 0;
    while (Atomics.load(stop, 0) === 0) {
      rounds++;
      target = sender.request();
      if (target !== 0) {
        if (workerData.mode === "marked") sender.signal(target);
        else {
          signalled.push(target);
          process.kill(process.pid, "SIGINT");
        }
      }
      // 0 to 0.4 ms between attempts, so they fall everywhere in a cell's life.
      Atomics.wait(pause, 0, 0, Math.random() * 0.4);
    }
    parentPort.postMessage({ signalled, rounds });
  })();
  `,
  { eval: true, workerData: { moduleUrl, state: interruptState, stop, mode } },
);

/** Busy for about `us` microseconds outside any vm call (compiling, publishing, ...). */
function busy(us) {
  const end = process.hrtime.bigint() + BigInt(Math.round(us * 1000));
  while (process.hrtime.bigint() < end);
}

const interrupted = [];
const otherErrors = [];
let cells = 0;
const end = Date.now() + durationMs;
while (Date.now() < end) {
  const k = beginCell();
  cells++;
  busy(Math.random() * 300);
  armVm(k);
  try {
    const n = Math.floor(Math.random() * 200_000);
    vm.runInThisContext(markedScript(`let s = 0; for (let i = 0; i < ${n}; i++) s += i; s`, k), {
      breakOnSigint: true,
      filename: "cell",
    });
  } catch (e) {
    if (e && e.code === "ERR_SCRIPT_EXECUTION_INTERRUPTED") interrupted.push(k);
    else otherErrors.push(String(e));
  } finally {
    disarmVm(k);
  }
  busy(Math.random() * 100);
  endCell(k);
  // Lets the process's SIGINT listener run, as the kernel's event loop would between cells.
  await new Promise((r) => setImmediate(r));
}
const fromWorker = new Promise((r) => worker.once("message", r));
Atomics.store(stop, 0, 1);
const { signalled, rounds } = await fromWorker;
await worker.terminate();
await new Promise((r) => setTimeout(r, 100));
process.stdout.write(JSON.stringify({ cells, rounds, interrupted, signalled, heard, otherErrors }) + "\n");
process.exit(0);

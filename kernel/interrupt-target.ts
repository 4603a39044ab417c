/**
 * Which cell an interrupt is for, shared between the main thread (which runs cells) and the
 * control thread (which receives `interrupt_request`), so that an interrupt reaches only the cell
 * that was running when it was received, and one received when no cell runs is dropped.
 *
 * Every cell gets a number (1, 2, ...) when its execute request starts. Five 32-bit words of
 * shared memory, each written with atomics:
 *
 * - RUNNING: the number of the cell whose request is being handled, 0 between cells (main thread).
 * - TARGET: the cell the latest interrupt is for (control thread; cleared when a cell starts).
 *   Interrupt points in cell loops (interrupt-points.ts) read it.
 * - COUNTER: the pass counter of the interrupt points.
 * - IN_VM: k while cell k's first synchronous stretch runs inside `vm` with `breakOnSigint`, -k
 *   while the control thread is sending that stretch a SIGINT, 0 otherwise.
 * - ENTERED: the last cell that entered `vm` (tells the control thread that a cell's stretch is
 *   over, so it stops waiting to send it a SIGINT).
 *
 * Why IN_VM is written from inside the cell's script. A SIGINT stops synchronous cell code only
 * while node's SIGINT watchdog runs, that is inside `script.runInContext`. Around that call node
 * takes the process's SIGINT listeners off and puts them back (node lib/vm.js,
 * `sigintHandlersWrap`), and the watchdog installs its own handler and restores node's exiting one
 * (src/node_watchdog.cc, `SigintWatchdogHelper::Start` and `Stop`); in between, for some tens of
 * microseconds on each side, a SIGINT has its default action and ends the kernel process (a node
 * process taking a SIGINT every few milliseconds around such calls died within a few signals on
 * this machine; test/kernel/interrupt-target.test.ts shows it). So the
 * script itself marks IN_VM as its first statement and clears it in a `finally` as its last: the
 * watchdog is running whenever IN_VM names a cell. The control thread sends a SIGINT only after
 * swapping IN_VM from k to -k (compare-and-swap); a cell leaving its script while IN_VM is -k
 * waits for the signal, which then ends the script. At most one SIGINT is sent per cell.
 *
 * So the kernel's own SIGINTs always land in the watchdog of the cell they were aimed at, never in
 * the process's listener and never in a later cell. A SIGINT from outside (Ctrl-C, or a client
 * using `interrupt_mode: "signal"`) can still land anywhere, as in any node process.
 */

/** Word indices in the shared buffer. */
const TARGET = 0;
const COUNTER = 1;
const RUNNING = 2;
const IN_VM = 3;
const ENTERED = 4;
const WORDS = 8;

/** The buffer both threads use (the control thread gets it in its workerData). */
export const interruptState = new SharedArrayBuffer(WORDS * 4);
const shared = new Int32Array(interruptState);

/** Passes of an interrupt point between two reads of TARGET (a power of two). */
export const CHECK_EVERY = 256;

/** Name of the global a cell's script calls to mark entering and leaving `vm`. */
export const VM_MARK = "__hushInVm";

// ---- main thread ------------------------------------------------------------------------------

let serial = 0;
/** The cell whose `vm` call is being made now (armed by execution.ts around that one call). */
let armed = 0;

/** Numbers a new cell and records it as running; clears the interrupt of the cell before. */
export function beginCell(): number {
  serial += 1;
  Atomics.store(shared, TARGET, 0);
  Atomics.store(shared, RUNNING, serial);
  return serial;
}

/** Records that cell `k` no longer runs. */
export function endCell(k: number): void {
  Atomics.compareExchange(shared, RUNNING, k, 0);
}

/** The running cell's number, 0 between cells. */
export function runningCell(): number {
  return Atomics.load(shared, RUNNING);
}

/** Was an interrupt received for cell `k` (and is `k` still running)? */
export function interruptedCell(k: number): boolean {
  return k !== 0 && Atomics.load(shared, TARGET) === k && Atomics.load(shared, RUNNING) === k;
}

/**
 * The interrupt points' pass counter, for interrupt-points.ts to count in place (a call per pass
 * made the tightest loops about 3x slower instead of 2x): the point calls `pointShouldStop` on
 * every CHECK_EVERY-th pass only.
 */
export const passCounter = { words: shared, index: COUNTER };

/**
 * An interrupt point's test, for a point in the code of cell `cell`: stop when the interrupted
 * cell is the running one (whatever loop runs then, its own or one an earlier cell left behind),
 * or, between cells, in the interrupted cell's own leftover work until the next cell starts.
 */
export function pointShouldStop(cell: number): boolean {
  const target = Atomics.load(shared, TARGET);
  if (target === 0) return false;
  const running = Atomics.load(shared, RUNNING);
  return running === target || (running === 0 && cell === target);
}

/**
 * The source tslab's `vm` call runs for cell `k`: the same script, marking IN_VM as its first
 * statement and clearing it as its last. The completion value is unchanged (a `try` statement's
 * value is its block's); only line 1 moves right, and errors are mapped by line.
 */
export function markedScript(code: string, k: number): string {
  return `${VM_MARK}(${k},1);try{${code}\n}finally{${VM_MARK}(${k},0)}`;
}

/** Allows cell `k`'s script to mark IN_VM (only during the `vm` call made for it). */
export function armVm(k: number): void {
  armed = k;
}

/** After cell `k`'s `vm` call returned or threw: IN_VM is 0 again whatever ended the script. */
export function disarmVm(k: number): void {
  armed = 0;
  if (Atomics.load(shared, IN_VM) === k || Atomics.load(shared, IN_VM) === -k) Atomics.store(shared, IN_VM, 0);
}

/** How long one wait for a SIGINT that is on its way lasts before looking again. */
const SIGNAL_WAIT_MS = 20;

function vmMark(k: number, entering: number): void {
  if (armed === 0 || k !== armed) return; // called by anything else than the marked script
  if (entering === 1) {
    // IN_VM before ENTERED: the control thread reads ENTERED first, then IN_VM.
    Atomics.store(shared, IN_VM, k);
    Atomics.store(shared, ENTERED, k);
    return;
  }
  for (;;) {
    const was = Atomics.compareExchange(shared, IN_VM, k, 0);
    if (was !== -k) return;
    // The control thread is sending this script a SIGINT: leaving now could let it land outside
    // the watchdog. The signal ends the script (the wait is woken by it); the control thread
    // puts k back if sending failed.
    Atomics.wait(shared, IN_VM, -k, SIGNAL_WAIT_MS);
  }
}

/** Defines the global the marked script calls (not writable, not enumerable). */
export function installVmMark(): void {
  if (Object.prototype.hasOwnProperty.call(globalThis, VM_MARK)) return;
  Object.defineProperty(globalThis, VM_MARK, { value: vmMark, enumerable: false, writable: false, configurable: false });
}

/** A SIGINT from outside the kernel (the process's listener): an interrupt for the running cell. */
export function interruptRunningCell(): number {
  const k = runningCell();
  if (k !== 0) raiseTarget(shared, k);
  return k;
}

// ---- control thread (and the listener above) -------------------------------------------------

/** Sets TARGET to `k` if `k` still runs afterwards; returns whether it does. */
function raiseTarget(view: Int32Array, k: number): boolean {
  Atomics.store(view, TARGET, k);
  // The next pass of any point reads TARGET, however slow the passes (the increment in the
  // points races with this store; the control thread repeats it while the cell runs).
  Atomics.store(view, COUNTER, CHECK_EVERY - 1);
  if (Atomics.load(view, RUNNING) === k) return true;
  // The cell ended meanwhile, and the next one may have cleared TARGET already: undo only ours.
  Atomics.compareExchange(view, TARGET, k, 0);
  return false;
}

/** The control thread's side, on the buffer it was sent. */
export class InterruptSender {
  private readonly view: Int32Array;

  constructor(
    buffer: SharedArrayBuffer,
    /** Sends SIGINT to this process (injected so tests can count). */
    private readonly sigint: () => void = () => process.kill(process.pid, "SIGINT"),
  ) {
    this.view = new Int32Array(buffer);
  }

  /**
   * On `interrupt_request`: the running cell, now marked as interrupted, or 0 when no cell runs
   * (the request is then dropped).
   */
  request(): number {
    const k = Atomics.load(this.view, RUNNING);
    if (k === 0) return 0;
    return raiseTarget(this.view, k) ? k : 0;
  }

  /** Is cell `k` still the running one, with its interrupt raised? */
  pending(k: number): boolean {
    return Atomics.load(this.view, RUNNING) === k && Atomics.load(this.view, TARGET) === k;
  }

  /** Moves the point counter to its next check again (see raiseTarget). */
  nudge(): void {
    Atomics.store(this.view, COUNTER, CHECK_EVERY - 1);
  }

  /**
   * Tries to stop cell `k`'s synchronous stretch with a SIGINT: "sent" once sent (now or by an
   * earlier call), "over" when that stretch is over (or the cell ended) and no signal is needed,
   * "wait" when it has not entered `vm` yet (compiling, say): call again shortly.
   */
  signal(k: number): "sent" | "over" | "wait" {
    if (Atomics.load(this.view, RUNNING) !== k) return "over";
    const entered = Atomics.load(this.view, ENTERED); // before IN_VM: see vmMark
    const inVm = Atomics.load(this.view, IN_VM);
    if (inVm === -k) return "sent";
    if (inVm === k) {
      if (Atomics.compareExchange(this.view, IN_VM, k, -k) !== k) return this.signal(k);
      try {
        this.sigint();
      } catch (e: unknown) {
        Atomics.compareExchange(this.view, IN_VM, -k, k);
        throw e;
      }
      return "sent";
    }
    return entered >= k ? "over" : "wait";
  }
}

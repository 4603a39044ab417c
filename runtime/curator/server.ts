/**
 * The curator's transport: one zeromq ROUTER socket. Every request is one JSON frame; every reply one
 * JSON frame back to the same peer. Requests are handled concurrently (spending is serialized inside
 * the service); replies go through one send queue because a zeromq socket allows one send at a time.
 *
 * tcp always runs CURVE (clients pin the server's public key); ipc relies on its private 0700 directory.
 */
import { curveKeyPair, Router } from "zeromq";
import { BadInputError } from "../errors.js";
import { MAX_FRAME_BYTES, PROTOCOL_VERSION, type Response } from "../protocol/messages.js";
import type { CurveKey } from "./keys.js";
import { CuratorService } from "./service.js";

/** Frames this much larger than MAX_FRAME_BYTES make libzmq drop the peer instead of us replying. */
const HARD_FRAME_LIMIT = 16 * MAX_FRAME_BYTES;

export interface RunningCurator {
  /** The bound address, with the real port for tcp. */
  address: string;
  publicKeyB64: string;
  curvePublicKey?: string;
  /**
   * Stops serving: requests in progress get up to `graceMs` (default: as long as they take), then
   * releases still computing are refused (nothing debited), their replies get a short moment to
   * leave, and the socket, engine and ledger close.
   */
  close(graceMs?: number): Promise<void>;
}

/** How long refusals sent at shutdown may take to leave before the socket closes. */
const SEND_GRACE_MS = 300;
/** Time the requests in progress get after SIGTERM/SIGINT. */
export const STOP_GRACE_MS = 1500;
/** The process is gone this long after the signal, in every state. */
export const EXIT_DEADLINE_MS = 3000;

/**
 * The signal path of `main.js` and `hush serve`: close with STOP_GRACE_MS for the requests in
 * progress, and exit the process EXIT_DEADLINE_MS after the signal whatever is still open (the
 * ledger is transactional, so even then no half-written spend remains).
 */
export function closeOnSignal(running: RunningCurator, log: (line: string) => void): Promise<void> {
  setTimeout(() => {
    log(`not closed within ${EXIT_DEADLINE_MS} ms; exiting`);
    process.exit(1);
  }, EXIT_DEADLINE_MS).unref();
  return running.close(STOP_GRACE_MS);
}

function protocolErrorFrame(message: string): Buffer {
  const res: Response = { v: PROTOCOL_VERSION, id: "", ok: false, error: { kind: "protocol", message } };
  return Buffer.from(JSON.stringify(res), "utf8");
}

function bindAddress(listen: string): { bind: string; tcp: boolean } {
  const tcp = /^tcp:\/\/([^/]+):(\d+|\*)$/.exec(listen);
  if (tcp) return { bind: `tcp://${tcp[1]}:${tcp[2] === "0" ? "*" : tcp[2]}`, tcp: true };
  if (/^ipc:\/\/.+/.test(listen)) return { bind: listen, tcp: false };
  throw new BadInputError(`listen address ${JSON.stringify(listen)} must be ipc://PATH or tcp://HOST:PORT`);
}

/** Opens the policy's service and serves it on `listen`. */
export async function startCurator(opts: {
  policyFile: string;
  listen: string;
  curve?: CurveKey;
}): Promise<RunningCurator> {
  bindAddress(opts.listen);
  const service = await CuratorService.open(opts.policyFile);
  return serveCurator(service, { listen: opts.listen, ...(opts.curve ? { curve: opts.curve } : {}) });
}

/** Serves an open service on `listen`; close() also closes the service. */
export async function serveCurator(service: CuratorService, opts: { listen: string; curve?: CurveKey }): Promise<RunningCurator> {
  let bound: { bind: string; tcp: boolean };
  try {
    bound = bindAddress(opts.listen);
  } catch (e: unknown) {
    await service.close();
    throw e;
  }
  const { bind, tcp } = bound;
  const curve = opts.curve ?? (tcp ? curveKeyPair() : undefined);
  const router = new Router({
    maxMessageSize: HARD_FRAME_LIMIT,
    linger: 0,
    ...(curve ? { curveServer: true, curveSecretKey: curve.secretKey, curvePublicKey: curve.publicKey } : {}),
  });
  try {
    await router.bind(bind);
  } catch (e: unknown) {
    router.close();
    await service.close();
    throw new BadInputError(`cannot listen on ${opts.listen}: ${e instanceof Error ? e.message : String(e)}`, { cause: e });
  }
  const address = router.lastEndpoint ?? opts.listen;

  let sendTail: Promise<void> = Promise.resolve();
  const send = (frames: Buffer[]): Promise<void> => {
    sendTail = sendTail.then(
      () => router.send(frames).catch((e: unknown) => {
        // The peer may have gone; its reply is dropped, the server carries on.
        if (!router.closed) process.stderr.write(`hush curator: reply not sent: ${e instanceof Error ? e.message : String(e)}\n`);
      }),
    );
    return sendTail;
  };

  const serveOne = async (msg: Buffer[]): Promise<void> => {
    const [peer, ...rest] = msg;
    // A REQ peer puts an empty delimiter frame before the payload; answer in the same shape.
    const delimited = rest.length === 2 && rest[0].length === 0;
    const payload = delimited ? rest.slice(1) : rest;
    let reply: Buffer;
    if (payload.length !== 1) reply = protocolErrorFrame(`expected one request frame, got ${payload.length}`);
    else reply = await service.handleFrame(payload[0], peer.toString("hex"));
    await send(delimited ? [peer, Buffer.alloc(0), reply] : [peer, reply]);
  };

  const pending = new Set<Promise<void>>();
  const loop = (async () => {
    try {
      for await (const msg of router) {
        const p = serveOne(msg).catch((e: unknown) => {
          process.stderr.write(`hush curator: ${e instanceof Error ? (e.stack ?? e.message) : String(e)}\n`);
        });
        pending.add(p);
        void p.finally(() => pending.delete(p));
      }
    } catch (e: unknown) {
      if (!router.closed) process.stderr.write(`hush curator: receive loop stopped: ${String(e)}\n`);
    }
  })();

  let closed: Promise<void> | null = null;
  return {
    address,
    publicKeyB64: service.publicKeyB64,
    ...(curve ? { curvePublicKey: curve.publicKey } : {}),
    close(graceMs = Infinity): Promise<void> {
      closed ??= (async () => {
        // New frames are refused from here on ("shutting down"); the ones in progress finish or,
        // after the grace, are refused when the worker pool stops.
        await service.close(graceMs);
        const flushed = Promise.allSettled([...pending]).then(() => sendTail);
        if (Number.isFinite(graceMs)) {
          let timer: NodeJS.Timeout | undefined;
          await Promise.race([flushed, new Promise<void>((r) => (timer = setTimeout(r, SEND_GRACE_MS)))]);
          clearTimeout(timer);
        } else {
          await flushed;
        }
        router.close();
        await loop;
      })();
      return closed;
    },
  };
}

/**
 * A stand-in curator transport for the client's reply tests: a real zeromq ROUTER on ipc (in a
 * private temp folder) or on tcp 127.0.0.1 port 0 with CURVE, which hands each request to the test
 * and sends back whatever frames the test crafts. No service behind it: the test decides every reply.
 */
import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { curveKeyPair, Router } from "zeromq";
import { CuratorClient, type CuratorClientOptions } from "../../runtime/client/client.js";
import type { Request } from "../../runtime/protocol/messages.js";

export type Transport = "ipc" | "tcp";

export interface Received {
  peer: Buffer;
  request: Request;
}

export class FakeRouter {
  private readonly inbox: Received[] = [];
  private readonly takers: ((r: Received) => void)[] = [];
  private sendTail: Promise<void> = Promise.resolve();
  private readonly loop: Promise<void>;

  private constructor(
    private readonly router: Router,
    readonly address: string,
    readonly curvePublicKey: string | undefined,
    private readonly dir: string,
  ) {
    this.loop = this.receive();
  }

  /** `ipcDir` reuses a folder (and so the address) of a router closed before: a curator restart. */
  static async start(transport: Transport, ipcDir?: string): Promise<FakeRouter> {
    const dir = ipcDir ?? mkdtempSync(join(tmpdir(), "hc-"));
    const curve = transport === "tcp" ? curveKeyPair() : undefined;
    const router = new Router({
      linger: 0,
      // Wait at the high-water mark instead of dropping, so a flood arrives whole.
      mandatory: true,
      ...(curve ? { curveServer: true, curveSecretKey: curve.secretKey, curvePublicKey: curve.publicKey } : {}),
    });
    await router.bind(transport === "tcp" ? "tcp://127.0.0.1:*" : `ipc://${join(dir, "c.sock")}`);
    return new FakeRouter(router, router.lastEndpoint!, curve?.publicKey, dir);
  }

  private async receive(): Promise<void> {
    try {
      for await (const [peer, frame] of this.router) {
        const got = { peer, request: JSON.parse(frame.toString("utf8")) as Request };
        const taker = this.takers.shift();
        if (taker) taker(got);
        else this.inbox.push(got);
      }
    } catch (e: unknown) {
      if (!this.router.closed) throw e;
    }
  }

  /** The next request the client sent. */
  next(): Promise<Received> {
    const waiting = this.inbox.shift();
    if (waiting) return Promise.resolve(waiting);
    return new Promise((ok) => this.takers.push(ok));
  }

  /** Sends crafted frames to a peer (after the routing id). */
  send(peer: Buffer, ...frames: (Buffer | string)[]): Promise<void> {
    this.sendTail = this.sendTail.then(() => this.router.send([peer, ...frames]));
    return this.sendTail;
  }

  connect(extra: Partial<CuratorClientOptions> = {}): Promise<CuratorClient> {
    return CuratorClient.connect({
      address: this.address,
      analyst: "ada",
      token: "token-for-tests",
      ...(this.curvePublicKey ? { curveServerKey: this.curvePublicKey } : {}),
      ...extra,
    });
  }

  get folder(): string {
    return this.dir;
  }

  async close(keepFolder = false): Promise<void> {
    await this.sendTail.catch(() => undefined);
    this.router.close();
    await this.loop;
    if (!keepFolder) rmSync(this.dir, { recursive: true, force: true });
  }
}

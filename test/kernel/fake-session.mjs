// A stand-in for kernel/hush-session.ts (loaded by the kernel through HUSH_KERNEL_SESSION_MODULE):
// records what the kernel asks of it so the protocol tests can check the wiring. No curator.
import { writeFileSync } from "node:fs";

export class HushSession {
  static create(host, env = process.env) {
    return new HushSession(host, env);
  }

  constructor(host, env) {
    this.host = host;
    this.env = env;
    this.spent = false;
    const self = this;
    this.api = {
      version: "fake",
      /** Pretends to release an aggregate: returns a marked object and counts as spending. */
      release(label) {
        self.spent = true;
        return { fakeRelease: label };
      },
      /** Shows a running line and updates it in place (display_id). */
      progress(id, text, update) {
        host.display({ data: { "text/plain": text }, metadata: {} }, { displayId: id, update });
      },
    };
  }

  async render(value) {
    if (value && typeof value === "object" && "fakeRelease" in value) {
      return {
        data: { "text/html": `<b>${value.fakeRelease}</b>`, "text/plain": `release ${value.fakeRelease}` },
        metadata: { hush: { fake: true } },
      };
    }
    return null;
  }

  async afterCell() {
    if (!this.spent) return null;
    this.spent = false;
    return { data: { "text/plain": "privacy loss so far: fake" }, metadata: {} };
  }

  typeDeclarations() {
    return [
      "declare const hush: {",
      "  /** version of the fake */",
      "  version: string;",
      "  release(label: string): { fakeRelease: string };",
      "  progress(id: string, text: string, update?: boolean): void;",
      "};",
    ].join("\n");
  }

  async close() {
    if (this.env.FAKE_SESSION_CLOSED_FILE) writeFileSync(this.env.FAKE_SESSION_CLOSED_FILE, "closed\n");
  }
}

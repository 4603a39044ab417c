/** `hush keygen --out FILE`: a new curator signing key. Never overwrites an existing key. */
import { generateCuratorKey } from "../../runtime/curator/keys.js";

export function runKeygen(o: { out: string }, out: (s: string) => void): void {
  const { publicKeyB64 } = generateCuratorKey(o.out);
  out(`private key   ${o.out} (mode 0600; keep it on the curator's machine)\n`);
  out(`public key    ${o.out}.pub (give it to reviewers: hush audit NOTEBOOK --key ${o.out}.pub)\n`);
  out(`public key (base64) ${publicKeyB64}\n`);
}

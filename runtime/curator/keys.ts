/**
 * The curator's keys: the Ed25519 signing key for receipts, and the CURVE key pair that encrypts and
 * authenticates the tcp transport. Private keys are written with mode 0600.
 */
import { createPrivateKey, createPublicKey, generateKeyPairSync, type KeyObject } from "node:crypto";
import { existsSync, mkdirSync, readFileSync, writeFileSync } from "node:fs";
import { dirname } from "node:path";
import { curveKeyPair } from "zeromq";
import { PolicyError } from "../errors.js";
import { keyIdOf, publicKeyB64 } from "../protocol/receipts.js";

export interface CuratorKey {
  privateKey: KeyObject;
  publicKey: KeyObject;
  /** base64 SPKI DER of the public key: what analysts and reviewers pin. */
  publicKeyB64: string;
  keyId: string;
}

function writePrivate(path: string, text: string): void {
  mkdirSync(dirname(path), { recursive: true, mode: 0o700 });
  // "wx": never overwrite an existing key; receipts signed with it would no longer verify.
  writeFileSync(path, text, { mode: 0o600, flag: "wx" });
}

/** Creates an Ed25519 key: PKCS#8 PEM at `privatePath` (0600) and the SPKI PEM at `<privatePath>.pub`. */
export function generateCuratorKey(privatePath: string): { publicKeyB64: string } {
  if (existsSync(privatePath)) throw new PolicyError(`curator key ${privatePath} already exists; not overwriting it`);
  const { privateKey, publicKey } = generateKeyPairSync("ed25519");
  writePrivate(privatePath, privateKey.export({ type: "pkcs8", format: "pem" }).toString());
  writeFileSync(`${privatePath}.pub`, publicKey.export({ type: "spki", format: "pem" }).toString(), { mode: 0o644 });
  return { publicKeyB64: publicKeyB64(publicKey) };
}

export function loadCuratorKey(path: string): CuratorKey {
  let text: string;
  try {
    text = readFileSync(path, "utf8");
  } catch (e: unknown) {
    throw new PolicyError(`curator key ${path} cannot be read`, { cause: e });
  }
  let privateKey: KeyObject;
  try {
    privateKey = createPrivateKey({ key: text, format: "pem" });
  } catch (e: unknown) {
    throw new PolicyError(`curator key ${path} is not a PEM private key`, { cause: e });
  }
  if (privateKey.asymmetricKeyType !== "ed25519") {
    throw new PolicyError(`curator key ${path} must be Ed25519, found ${privateKey.asymmetricKeyType ?? "unknown"}`);
  }
  const publicKey = createPublicKey(privateKey);
  return { privateKey, publicKey, publicKeyB64: publicKeyB64(publicKey), keyId: keyIdOf(publicKey) };
}

/** A CURVE (Curve25519) key pair as the z85 text that libzmq takes. */
export interface CurveKey {
  publicKey: string;
  secretKey: string;
}

export function generateCurveKey(path: string): CurveKey {
  if (existsSync(path)) throw new PolicyError(`CURVE key ${path} already exists; not overwriting it`);
  const pair = curveKeyPair();
  writePrivate(path, `${JSON.stringify({ publicKey: pair.publicKey, secretKey: pair.secretKey })}\n`);
  return { publicKey: pair.publicKey, secretKey: pair.secretKey };
}

/** Reads a CURVE key file: JSON `{"publicKey": z85, "secretKey": z85}` as written by generateCurveKey. */
export function loadCurveKey(path: string): CurveKey {
  let parsed: unknown;
  try {
    parsed = JSON.parse(readFileSync(path, "utf8"));
  } catch (e: unknown) {
    throw new PolicyError(`CURVE key ${path} cannot be read as JSON`, { cause: e });
  }
  const o = parsed as Record<string, unknown> | null;
  const z85 = /^[0-9a-zA-Z.\-:+=^!/*?&<>()[\]{}@%$#]{40}$/;
  if (!o || typeof o.publicKey !== "string" || typeof o.secretKey !== "string" || !z85.test(o.publicKey) || !z85.test(o.secretKey)) {
    throw new PolicyError(`CURVE key ${path} must hold "publicKey" and "secretKey" as 40-character z85 strings`);
  }
  return { publicKey: o.publicKey, secretKey: o.secretKey };
}

/** The audit report for people: a summary, the findings and notes by cell, and one verdict line. */
import { formatDecimal } from "../../runtime/protocol/format.js";
import type { AuditReport } from "./checks.js";

/** The last line of every report; tests and scripts look for its first words. */
export function verdictLine(r: AuditReport): string {
  if (r.ok) {
    return r.receipts === 0
      ? "verdict: PASS (no releases in this notebook)"
      : `verdict: PASS (${r.receipts} receipt${r.receipts === 1 ? "" : "s"} verified, spend within the cap${r.superseded.releases > 0 ? `, ${supersededText(r)} not shown but counted` : ""})`;
  }
  return `verdict: FAIL (${r.findings.length} finding${r.findings.length === 1 ? "" : "s"})`;
}

/** A receipt amount for the summary; a forged one that is not a number is quoted as it stands (the findings say why). */
function amount(x: string): string {
  try {
    return formatDecimal(x, 6);
  } catch {
    return JSON.stringify(String(x).slice(0, 40));
  }
}

/** "2 releases (ε 0.3)": the spend the notebook does not show. */
export function supersededText(r: AuditReport): string {
  const s = r.superseded;
  const sym = r.unit === "rho" ? "ρ" : "ε";
  return `${s.releases} release${s.releases === 1 ? "" : "s"} (${s.spend === null ? "spend unknown" : `${sym} ${s.spend}`})`;
}

function spendText(r: AuditReport): string {
  if (r.total === null || r.cap === null) return "no spend shown";
  const sym = r.unit === "rho" ? "ρ" : "ε";
  let s = `${sym} ${amount(r.total)} of cap ${amount(r.cap)}`;
  if (r.unit === "rho" && r.totalEpsilon !== null) s += ` (ε ${amount(r.totalEpsilon)} at δ ${r.delta ?? "?"}${r.epsilonBy !== null ? `, by ${r.epsilonBy}` : ""})`;
  if (r.reviewCap !== null) s += `; review cap ε ${r.reviewCap}`;
  return s;
}

export function formatReport(file: string, r: AuditReport): string {
  const lines: string[] = [];
  lines.push(`hush audit: ${file}`);
  lines.push(`  curator key   ${r.keyId}`);
  if (r.analyst !== null) {
    const on = r.datasets.length === 1 ? `dataset ${r.datasets[0]}` : `datasets ${r.datasets.join(", ")}`;
    lines.push(`  analyst       ${r.analyst} on ${on} (population ${r.population})`);
  }
  lines.push(`  releases      ${r.releases} output${r.releases === 1 ? "" : "s"} with receipts, ${r.receipts} distinct, ${r.replays} repeated`);
  lines.push(`  spend         ${spendText(r)}`);
  if (r.superseded.releases > 0) lines.push(`  not shown     ${supersededText(r)}, spent but superseded or shown elsewhere; counted in the spend above`);
  if (r.findings.length > 0) {
    lines.push("  findings:");
    for (const f of r.findings) lines.push(`    - [${f.kind}] ${f.message}`);
  } else {
    lines.push("  every signature verifies, the chain links and its totals add up exactly, shown values match the signed ones");
  }
  if (r.notes.length > 0) {
    lines.push("  notes (not findings; --strict makes them findings):");
    for (const f of r.notes) lines.push(`    - [${f.kind}] ${f.message}`);
  }
  lines.push(verdictLine(r));
  return `${lines.join("\n")}\n`;
}

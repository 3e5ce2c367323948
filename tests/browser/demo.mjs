// Starts `oedolog demo` on port 0 and waits for its `dashboard at http://ADDR/` line (no fixed port,
// no sleep-to-start); a browser with flags known to work on Debian's chromium (CHROMIUM_ARGS below).
import { spawn } from "node:child_process";
import fs from "node:fs";
import os from "node:os";
import path from "node:path";
import { chromium } from "playwright-core";

export const repoRoot = path.resolve(path.dirname(new URL(import.meta.url).pathname), "../..");

export function tempDir(prefix) {
  return fs.mkdtempSync(path.join(os.tmpdir(), prefix));
}

// Resolves to {base, stop(), output()} once the demo prints its dashboard address.
export function startDemo({ binary, frames = 4, speed = 2000, config, label = "demo", timeoutMs = 60000 }) {
  const dir = tempDir("oedolog-browser-");
  const args = ["demo", "--db", path.join(dir, "lab.db"), "--listen", "127.0.0.1:0", "--speed", String(speed), "--frames", String(frames)];
  if (config) {
    const file = path.join(dir, "oedolog.toml");
    fs.writeFileSync(file, config);
    args.push("--config", file);
  }
  const child = spawn(binary, args, { stdio: ["ignore", "pipe", "pipe"], env: { ...process.env, RUST_LOG: process.env.RUST_LOG || "warn" } });
  let out = "";
  const collect = (chunk) => { out += chunk.toString(); if (out.length > 200000) out = out.slice(-100000); };
  child.stdout.on("data", collect);
  child.stderr.on("data", collect);
  const stop = () => new Promise((resolve) => {
    if (child.exitCode !== null || child.signalCode !== null) return resolve();
    child.once("exit", () => resolve());
    child.kill("SIGTERM");
    setTimeout(() => { if (child.exitCode === null) child.kill("SIGKILL"); }, 5000).unref();
  });
  return new Promise((resolve, reject) => {
    const timer = setTimeout(() => { stop(); reject(new Error(label + ": no `dashboard at` line within " + timeoutMs + " ms; output:\n" + out.slice(-3000))); }, timeoutMs);
    const look = () => {
      const m = out.match(/dashboard at (http:\/\/[^\s/]+)\//);
      if (m) {
        clearTimeout(timer);
        child.stdout.off("data", look);
        resolve({ base: m[1], stop, output: () => out, pid: child.pid, dir });
      }
    };
    child.stdout.on("data", look);
    child.once("exit", (code, signal) => { clearTimeout(timer); reject(new Error(label + " exited early (" + (code ?? signal) + "):\n" + out.slice(-3000))); });
  });
}

export const CHROMIUM_ARGS = [
  "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
  "--disable-background-networking", "--disable-component-update", "--disable-sync",
];

// A browser context on a fresh user-data-dir; `httpCredentials` answers the daemon's Basic challenge.
export async function openBrowser({ httpCredentials, viewport = { width: 1440, height: 900 } } = {}) {
  const executablePath = process.env.OEDOLOG_CHROMIUM || "/usr/bin/chromium";
  const context = await chromium.launchPersistentContext(tempDir("oedolog-chromium-"), {
    executablePath, headless: true, args: CHROMIUM_ARGS, viewport, httpCredentials,
  });
  return context;
}

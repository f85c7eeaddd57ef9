// Shared set-up for grove's browser tests: Debian's Chromium, headless, with an empty
// profile and nothing that talks to the network on its own.
import { chromium } from 'playwright-core';
import { mkdtempSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';

export const CHROMIUM = process.env.GROVE_CHROMIUM || '/usr/bin/chromium';
export const FLAGS = [
  '--headless', '--no-sandbox', '--disable-gpu', '--disable-quic', '--no-first-run',
  '--disable-background-networking', '--disable-component-update', '--disable-sync',
];

/** A browser context on a fresh, empty --user-data-dir. */
export async function launch(viewport = { width: 1200, height: 760 }) {
  const profile = mkdtempSync(join(tmpdir(), 'grove-chromium-'));
  return chromium.launchPersistentContext(profile, {
    executablePath: CHROMIUM, headless: true, args: FLAGS, viewport,
  });
}

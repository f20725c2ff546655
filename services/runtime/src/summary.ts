// The terminal's live summary for whoever started the process: is it flowing, how fast, what does
// the firm carry, which limits are closest, what just happened. Rendering is a pure function of a
// sample so that it is testable; the printer only decides when and how to write it (redrawn in
// place on a TTY at most twice a second, a plain block every few seconds otherwise).
import type { AlertMsg, ExposureMsg, StaleFeedMsg } from '@keelson/shared-types';

export interface LimitLine {
  limitId: string;
  nodeKey: string;
  metric: string;
  utilization: number;
  level: string;
}

export interface SummarySample {
  /** Valuation clock (the simulated market's time in the demo). */
  marketMs: number;
  speed: number;
  url?: string;
  ready: boolean;
  firm?: ExposureMsg;
  desks: ExposureMsg[];
  limits: LimitLine[];
  recentAlerts: (AlertMsg | StaleFeedMsg)[];
  inputsPerSec: number;
  revaluationsPerSec: number;
  p50Ms: number;
  p99Ms: number;
  positions: number;
  nodes: number;
  rejected: number;
  staleFeeds: number;
}

/** 1234567 -> "1.23M", -950 -> "-950", 0.5 -> "0.50": four significant-ish characters. */
export function compact(n: number | null | undefined): string {
  if (n === null || n === undefined || !Number.isFinite(n)) return '-';
  const a = Math.abs(n);
  const units: [number, string][] = [
    [1e12, 'T'],
    [1e9, 'B'],
    [1e6, 'M'],
    [1e3, 'k'],
  ];
  for (const [size, suffix] of units)
    if (a >= size) return `${(n / size).toFixed(a / size >= 100 ? 0 : a / size >= 10 ? 1 : 2)}${suffix}`;
  return a >= 100 ? n.toFixed(0) : a >= 10 ? n.toFixed(1) : n.toFixed(2);
}

function ms(n: number): string {
  if (!Number.isFinite(n)) return '-';
  return n >= 100 ? `${n.toFixed(0)} ms` : `${n.toFixed(1)} ms`;
}

const COLS = ['pv', 'pnl', 'cashDelta', 'cashGamma', 'vega', 'theta', 'rho'] as const;
const HEAD = ['pv', 'pnl', 'cash dlt', 'cash gam', 'vega', 'theta', 'rho'];

function greekRow(label: string, e: ExposureMsg): string {
  return label.padEnd(18).slice(0, 18) + COLS.map((c) => compact(e[c]).padStart(10)).join('');
}

function clock(msEpoch: number): string {
  return new Date(msEpoch).toISOString().replace('T', ' ').slice(0, 19);
}

export function renderSummary(s: SummarySample): string {
  const lines: string[] = [];
  const speed = s.speed === 1 ? '' : ` (market moving x${s.speed})`;
  lines.push(
    `keelson  ${s.ready ? 'READY' : 'starting'}  market ${clock(s.marketMs)}Z${speed}${s.url ? `  ${s.url}` : ''}`,
  );
  lines.push(
    `flow    ${compact(s.inputsPerSec)} inputs/s  ${compact(s.revaluationsPerSec)} revaluations/s  ` +
      `tick->publish p50 ${ms(s.p50Ms)} p99 ${ms(s.p99Ms)}`,
  );
  lines.push(
    `book    ${s.positions} positions  ${s.nodes} nodes  ${s.rejected} rejected  ${s.staleFeeds} stale feeds`,
  );
  lines.push('');
  lines.push(''.padEnd(18) + HEAD.map((h) => h.padStart(10)).join(''));
  if (s.firm) lines.push(greekRow('FIRM', s.firm));
  for (const d of s.desks) lines.push(greekRow(`  ${d.node.desk ?? d.nodeKey}`, d));
  lines.push('');
  lines.push('closest limits');
  if (s.limits.length === 0) lines.push('  (none)');
  for (const l of s.limits) {
    const pct = `${(l.utilization * 100).toFixed(1)}%`.padStart(7);
    const mark = l.level === 'breach' ? '!! BREACH' : l.level === 'warning' ? ' ! warning' : '   ok';
    lines.push(`  ${pct} ${mark.padEnd(10)} ${l.limitId}  ${l.metric} on ${l.nodeKey}`);
  }
  lines.push('');
  lines.push('latest alerts');
  if (s.recentAlerts.length === 0) lines.push('  (none)');
  for (const a of [...s.recentAlerts].reverse()) {
    const t = a.ts.slice(11, 19);
    if (a.type === 'alert')
      lines.push(
        `  ${t}  ${a.state.padEnd(9)} ${a.severity.padEnd(7)} ${a.limitId}  ${(a.utilization * 100).toFixed(1)}%`,
      );
    else
      lines.push(`  ${t}  feed ${a.state.padEnd(4)} ${a.underlying}  last tick ${a.lastTick.slice(11, 19)}`);
  }
  return lines.join('\n') + '\n';
}

/** One line: the closing words of a run, and for logs where a block would be noise. */
export function renderSummaryLine(s: SummarySample): string {
  const f = s.firm;
  const top = s.limits[0];
  return (
    `[${clock(s.marketMs)}Z] ${compact(s.inputsPerSec)} in/s ${compact(s.revaluationsPerSec)} reval/s ` +
    `p50 ${ms(s.p50Ms)} p99 ${ms(s.p99Ms)} | firm pv ${compact(f?.pv)} pnl ${compact(f?.pnl)} cashDelta ${compact(f?.cashDelta)} ` +
    `vega ${compact(f?.vega)} theta ${compact(f?.theta)} | ${s.positions} pos ${s.rejected} rej` +
    (top ? ` | top limit ${top.limitId} ${(top.utilization * 100).toFixed(1)}% ${top.level}` : '') +
    (s.recentAlerts.length ? ` | alerts ${s.recentAlerts.length}` : '')
  );
}

export interface SummaryPrinterOptions {
  out: NodeJS.WritableStream;
  tty: boolean;
  sample: () => SummarySample;
  /** Default 500 ms on a TTY, 5 000 ms otherwise. */
  intervalMs?: number;
}

export class SummaryPrinter {
  private timer: NodeJS.Timeout | null = null;
  constructor(private readonly opts: SummaryPrinterOptions) {}

  start(): void {
    const every = this.opts.intervalMs ?? (this.opts.tty ? 500 : 5_000);
    this.timer = setInterval(() => this.print(), every);
    this.timer.unref();
  }

  print(): void {
    const s = this.opts.sample();
    if (this.opts.tty) this.opts.out.write(`\x1b[H\x1b[2J${renderSummary(s)}`);
    // Plain output keeps every block: a log collector or CI console reads it top to bottom.
    else this.opts.out.write(`--- ${new Date().toISOString()}\n${renderSummary(s)}`);
  }

  stop(): void {
    if (this.timer) clearInterval(this.timer);
    this.timer = null;
  }
}

/**
 * How numbers, intervals, times and statuses read in the chip and the side panel.
 *
 * Pure module (unit-tested under node).
 */
import { IDesignSummary } from './protocol';

/** A number with three decimals, or in exponent form when very large or small; "–" if missing. */
export function formatNumber(value: number | null | undefined): string {
  if (value === null || value === undefined || !Number.isFinite(value)) {
    return '–';
  }
  const size = Math.abs(value);
  if (size !== 0 && (size >= 1e5 || size < 1e-3)) {
    return value.toExponential(2);
  }
  const text = value.toFixed(3);
  return text === '-0.000' ? '0.000' : text;
}

/** "[low, high]", or "" when there is no interval. */
export function formatInterval(ci: IDesignSummary['robust_ci']): string {
  if (!ci) {
    return '';
  }
  return `[${formatNumber(ci[0])}, ${formatNumber(ci[1])}]`;
}

/** "95%" from 0.95; "" when unknown. */
export function formatLevel(level: number | null): string {
  if (level === null || !Number.isFinite(level)) {
    return '';
  }
  return `${Number((level * 100).toFixed(1))}%`;
}

/** The kernel's clock time "HH:MM:SS" from an ISO 8601 string (as the board view shows it). */
export function formatTime(iso: string | null): string {
  if (!iso) {
    return '';
  }
  const match = /T(\d{2}:\d{2}:\d{2})/.exec(iso);
  return match ? match[1] : '';
}

/** A cutoff as written: 40, 40.5, or the name of the notebook variable that holds it. */
export function formatCutoff(cutoff: IDesignSummary['cutoff']): string {
  if (cutoff === null) {
    return '–';
  }
  return typeof cutoff === 'number' ? String(cutoff) : cutoff;
}

/** "fresh", "stale (paused)", ... */
export function statusLabel(summary: Pick<IDesignSummary, 'status' | 'paused'>): string {
  return summary.paused ? `${summary.status} (paused)` : summary.status;
}

/** The pieces a chip shows; every one is plain text. */
export interface IChipText {
  status: string;
  estimate: string;
  interval: string;
  updated: string;
  /** One line for the tooltip and for screen readers. */
  title: string;
}

export function chipText(summary: IDesignSummary): IChipText {
  const level = formatLevel(summary.level);
  const interval = summary.robust_ci
    ? `robust ${level ? level + ' ' : ''}CI ${formatInterval(summary.robust_ci)}`
    : '';
  const updated = summary.updated_at ? `updated ${formatTime(summary.updated_at)}` : '';
  const estimate = `estimate ${formatNumber(summary.estimate)}`;
  const what = [
    summary.outcome ? `jump in ${summary.outcome}` : '',
    summary.score ? `at ${summary.score} = ${formatCutoff(summary.cutoff)}` : ''
  ]
    .filter(Boolean)
    .join(' ');
  const title = [
    `${summary.name}: ${statusLabel(summary)}`,
    what,
    `${estimate}${interval ? ', ' + interval : ''}`,
    updated,
    summary.error ? `error: ${summary.error}` : ''
  ]
    .filter(Boolean)
    .join('; ');
  return { status: statusLabel(summary), estimate, interval, updated, title };
}

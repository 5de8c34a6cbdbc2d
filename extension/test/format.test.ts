import assert from 'node:assert/strict';
import { test } from 'node:test';

import {
  chipText,
  formatCutoff,
  formatInterval,
  formatLevel,
  formatNumber,
  formatTime,
  statusLabel
} from '../src/format';
import { IDesignSummary } from '../src/protocol';

const SUMMARY: IDesignSummary = {
  name: 'tutoring',
  score: 'reading_score',
  cutoff: 40,
  outcome: 'math_gain',
  kind: 'sharp',
  estimate: 3.25644,
  robust_ci: [2.12205, 4.74857],
  level: 0.95,
  status: 'fresh',
  paused: false,
  updated_at: '2026-01-02T13:04:05+00:00',
  error: null
};

test('numbers read with three decimals, extremes in exponent form', () => {
  assert.equal(formatNumber(3.25644), '3.256');
  assert.equal(formatNumber(-0.0001), '-1.00e-4');
  assert.equal(formatNumber(-0.0000000001 * 0), '0.000');
  assert.equal(formatNumber(-0.0004999), '-5.00e-4');
  assert.equal(formatNumber(123456), '1.23e+5');
  assert.equal(formatNumber(null), '–');
  assert.equal(formatNumber(Number.NaN), '–');
});

test('intervals, levels, times and cutoffs', () => {
  assert.equal(formatInterval([2.12205, 4.74857]), '[2.122, 4.749]');
  assert.equal(formatInterval([null, 1]), '[–, 1.000]');
  assert.equal(formatInterval(null), '');
  assert.equal(formatLevel(0.95), '95%');
  assert.equal(formatLevel(0.975), '97.5%');
  assert.equal(formatLevel(null), '');
  assert.equal(formatTime('2026-01-02T13:04:05+00:00'), '13:04:05');
  assert.equal(formatTime('2026-01-02T13:04:05.123456'), '13:04:05');
  assert.equal(formatTime('yesterday'), '');
  assert.equal(formatTime(null), '');
  assert.equal(formatCutoff(40), '40');
  assert.equal(formatCutoff(-0.5), '-0.5');
  assert.equal(formatCutoff('pass_mark'), 'pass_mark');
  assert.equal(formatCutoff(null), '–');
});

test('the chip names status, estimate, robust CI and update time', () => {
  const text = chipText(SUMMARY);
  assert.deepEqual(
    [text.status, text.estimate, text.interval, text.updated],
    ['fresh', 'estimate 3.256', 'robust 95% CI [2.122, 4.749]', 'updated 13:04:05']
  );
  assert.equal(
    text.title,
    'tutoring: fresh; jump in math_gain at reading_score = 40; ' +
      'estimate 3.256, robust 95% CI [2.122, 4.749]; updated 13:04:05'
  );
});

test('a failed or paused board says so', () => {
  const failed = chipText({
    ...SUMMARY,
    status: 'error',
    estimate: null,
    robust_ci: null,
    error: 'ValueError: no rows'
  });
  assert.equal(failed.interval, '');
  assert.equal(failed.estimate, 'estimate –');
  assert.match(failed.title, /error: ValueError: no rows$/);
  assert.equal(statusLabel({ status: 'stale', paused: true }), 'stale (paused)');
});

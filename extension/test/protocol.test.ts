import assert from 'node:assert/strict';
import { test } from 'node:test';

import { PROTOCOL_VERSION, isDesignSummary, parseKernelMessage } from '../src/protocol';
import examples from './fixtures/messages.json';

const FIXTURES = examples as unknown as Record<string, unknown>;

test('every example kernel message is accepted with its type', () => {
  for (const [key, message] of Object.entries(FIXTURES)) {
    if (key.startsWith('_')) {
      continue;
    }
    const parsed = parseKernelMessage(message);
    assert.ok('message' in parsed, `${key}: ${JSON.stringify(parsed)}`);
    assert.equal(parsed.message.type, (message as { type: string }).type);
  }
});

test('a message from another protocol version is refused', () => {
  const other = { ...(FIXTURES.hello_reply as object), version: PROTOCOL_VERSION + 1 };
  const parsed = parseKernelMessage(other);
  assert.ok('problem' in parsed);
  assert.match(parsed.problem, /channel version 2; this extension speaks 1/);
});

test('malformed messages are refused with a reason', () => {
  const cases: [unknown, RegExp][] = [
    [null, /JSON object/],
    [[1, 2], /JSON object/],
    [{ version: 1 }, /string `type`/],
    [{ type: 'list_reply', version: 1, reply_to: 'x' }, /boolean `success`/],
    [{ type: 'list_reply', version: 1, reply_to: 'x', success: false }, /must carry an `error`/],
    [{ type: 'list_reply', version: 1, reply_to: 'x', success: true, designs: [{}] }, /malformed/],
    [{ type: 'update', version: 1, design: { name: 'a' } }, /valid `design`/],
    [{ type: 'removed', version: 1 }, /string `name`/],
    [{ type: 'mystery_reply', version: 1, reply_to: 'x', success: true }, /malformed/]
  ];
  for (const [message, reason] of cases) {
    const parsed = parseKernelMessage(message);
    assert.ok('problem' in parsed, JSON.stringify(message));
    assert.match(parsed.problem, reason);
  }
});

test('a design summary needs every field with the right type', () => {
  const good = (FIXTURES.list_reply as { designs: Record<string, unknown>[] }).designs[0];
  assert.ok(isDesignSummary(good));
  for (const [field, bad] of [
    ['estimate', 'NaN'],
    ['status', 'sleeping'],
    ['robust_ci', [1]],
    ['paused', 'no'],
    ['name', null]
  ] as const) {
    assert.equal(isDesignSummary({ ...good, [field]: bad }), false, field);
  }
  const { level, ...missing } = good;
  assert.equal(level, 0.95);
  assert.equal(isDesignSummary(missing), false);
});

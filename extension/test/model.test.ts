import assert from 'node:assert/strict';
import { test } from 'node:test';

import { ChannelError, DesignChannel, ICommLike, IDesignsChange } from '../src/model';
import { IDesignSummary } from '../src/protocol';

const DESIGN: IDesignSummary = {
  name: 'tutoring',
  score: 'reading_score',
  cutoff: 40,
  outcome: 'math_gain',
  kind: 'sharp',
  estimate: 3.2,
  robust_ci: [2.1, 4.7],
  level: 0.95,
  status: 'fresh',
  paused: false,
  updated_at: '2026-01-02T03:04:05',
  error: null
};

type Handler = (request: any, comm: FakeComm) => unknown;

/** A comm whose kernel answers with `handler` (undefined: no answer; 'close': close the comm). */
class FakeComm implements ICommLike {
  constructor(private handler: Handler) {}
  sent: any[] = [];
  closed = false;
  onMsg(_msg: { content: { data: unknown } }): unknown {
    return undefined;
  }
  onClose(_msg: unknown): unknown {
    return undefined;
  }
  open(data: any): void {
    this.send(data);
  }
  send(data: any): void {
    this.sent.push(data);
    const answer = this.handler(data, this);
    setTimeout(() => {
      if (answer === 'close') {
        this.closed = true;
        this.onClose({});
      } else if (answer !== undefined) {
        this.deliver(answer);
      }
    }, 0);
  }
  deliver(data: unknown): void {
    this.onMsg({ content: { data } });
  }
  close(): void {
    this.closed = true;
  }
}

function reply(request: any, fields: object): object {
  return { type: `${request.type}_reply`, version: 1, reply_to: request.id, success: true, ...fields };
}

const kernel: Handler = request => {
  switch (request.type) {
    case 'hello':
      return reply(request, { protocol: 1, seamline_version: '0.1.0' });
    case 'subscribe':
      return reply(request, { designs: [DESIGN] });
    case 'export':
      return request.name === 'tutoring'
        ? reply(request, { name: request.name, what: request.what, format: request.format, text: 'TEX' })
        : reply(request, { success: false, error: "KeyError: `name` must be ...; got 'x'." });
    case 'paper_add':
      return reply(request, { name: request.name, table: request.table, columns: [request.name], text: '| |' });
    case 'paper_tables':
      return reply(request, { tables: [{ name: 'main', columns: ['tutoring'] }] });
    case 'dataframes':
      return undefined; // a kernel busy for ever
    default:
      return undefined;
  }
};

function channelWith(handler: Handler, timeoutMs = 50) {
  const comms: FakeComm[] = [];
  const channel = new DesignChannel({
    clientVersion: '0.1.0',
    timeoutMs,
    openComm: () => {
      const comm = new FakeComm(handler);
      comms.push(comm);
      return comm;
    }
  });
  return { channel, comms };
}

test('connect says hello on the open message, subscribes and keeps the designs', async () => {
  const { channel, comms } = channelWith(kernel);
  const states: string[] = [];
  channel.stateChanged.connect((_, s) => states.push(s));
  assert.equal(await channel.connect(), true);
  assert.deepEqual(states, ['connecting', 'ready']);
  const [hello, subscribe] = comms[0].sent;
  assert.deepEqual(
    { type: hello.type, version: hello.version, client_version: hello.client_version },
    { type: 'hello', version: 1, client_version: '0.1.0' }
  );
  assert.equal(subscribe.type, 'subscribe');
  assert.notEqual(hello.id, subscribe.id);
  assert.equal(channel.kernelVersion, '0.1.0');
  assert.deepEqual([...channel.designs.keys()], ['tutoring']);
});

test('pushes update and remove designs and say which changed', async () => {
  const { channel, comms } = channelWith(kernel);
  await channel.connect();
  const changes: IDesignsChange[] = [];
  channel.designsChanged.connect((_, c) => changes.push(c));
  comms[0].deliver({ type: 'update', version: 1, design: { ...DESIGN, status: 'recomputing' } });
  comms[0].deliver({ type: 'update', version: 1, design: { ...DESIGN, name: 'other' } });
  comms[0].deliver({ type: 'removed', version: 1, name: 'tutoring' });
  comms[0].deliver({ type: 'removed', version: 1, name: 'never-there' });
  assert.deepEqual(changes, [
    { changed: ['tutoring'], removed: [] },
    { changed: ['other'], removed: [] },
    { changed: [], removed: ['tutoring'] }
  ]);
  assert.deepEqual([...channel.designs.keys()], ['other']);
});

test('requests resolve with their reply; error replies reject with the kernel message', async () => {
  const { channel } = channelWith(kernel);
  await channel.connect();
  assert.equal(await channel.exportText('tutoring', 'estimate', 'latex'), 'TEX');
  await assert.rejects(channel.exportText('x', 'estimate', 'latex'), (error: Error) => {
    assert.ok(error instanceof ChannelError);
    assert.match(error.message, /^KeyError: `name` must be/);
    return true;
  });
});

test('a request the kernel never answers times out', async () => {
  const { channel } = channelWith(kernel, 20);
  await channel.connect();
  await assert.rejects(channel.dataframes(), /did not answer `dataframes` within/);
});

test('a kernel without the target closes the comm: unavailable, then a later connect works', async () => {
  let loaded = false;
  const { channel, comms } = channelWith((request, comm) =>
    loaded ? kernel(request, comm) : 'close'
  );
  assert.equal(await channel.connect(), false);
  assert.equal(channel.state, 'unavailable');
  assert.match(channel.problem, /%load_ext seamline/);
  await assert.rejects(channel.dataframes(), /not open/);
  loaded = true;
  assert.equal(await channel.connect(), true);
  assert.equal(comms.length, 2);
  assert.equal(channel.state, 'ready');
});

test('a failed hello is reported, and a malformed reply rejects its request', async () => {
  const refusing = channelWith(request =>
    reply(request, { success: false, error: 'ValueError: `version` must be 1; got 2.' })
  );
  assert.equal(await refusing.channel.connect(), false);
  assert.equal(refusing.channel.state, 'failed');
  assert.match(refusing.channel.problem, /`version` must be 1/);

  const garbled = channelWith(request =>
    request.type === 'hello' ? reply(request, { protocol: 1 }) : undefined
  );
  assert.equal(await garbled.channel.connect(), false);
  assert.deepEqual(garbled.channel.problems, ['malformed `hello_reply` message']);
});

test('reset forgets designs; a closed comm after ready returns to idle', async () => {
  const { channel, comms } = channelWith(kernel);
  await channel.connect();
  channel.reset();
  assert.equal(channel.state, 'idle');
  assert.equal(channel.designs.size, 0);
  assert.ok(comms[0].closed);
  await channel.connect();
  comms[1].onClose({});
  assert.equal(channel.state, 'idle');
  assert.equal(channel.designs.size, 0);
  // messages on a dropped comm are ignored
  comms[0].deliver({ type: 'update', version: 1, design: DESIGN });
  assert.equal(channel.designs.size, 0);
});

test('two connects at once share one attempt', async () => {
  const { channel, comms } = channelWith(kernel);
  const [a, b] = await Promise.all([channel.connect(), channel.connect()]);
  assert.deepEqual([a, b], [true, true]);
  assert.equal(comms.length, 1);
});

test('a reset while connecting leaves the channel idle, not unavailable', async () => {
  const { channel } = channelWith(() => undefined); // hello waits (cells running)
  const attempt = channel.connect();
  assert.equal(channel.state, 'connecting');
  channel.reset();
  assert.equal(await attempt, false);
  assert.equal(channel.state, 'idle');
});

test('the script and paper-table requests carry the design and the table', async () => {
  const { channel, comms } = channelWith(kernel);
  await channel.connect();
  assert.equal(await channel.script('tutoring'), 'TEX');
  const script = comms[0].sent.at(-1);
  assert.deepEqual([script.type, script.name, script.what, script.format], ['export', 'tutoring', 'script', 'text']);
  const added = await channel.paperAdd('tutoring', 'main');
  assert.deepEqual([added.table, added.columns], ['main', ['tutoring']]);
  const add = comms[0].sent.at(-1);
  assert.deepEqual([add.type, add.name, add.table], ['paper_add', 'tutoring', 'main']);
  assert.deepEqual(await channel.paperTables(), [{ name: 'main', columns: ['tutoring'] }]);
});

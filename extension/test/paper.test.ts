import assert from 'node:assert/strict';
import { test } from 'node:test';

import {
  MAX_TABLE_NAME,
  fileStem,
  folderOf,
  joinPath,
  replicationFileName,
  tableCode,
  tableNameProblem
} from '../src/paper';

test('the script is saved as <design>_replication.py next to the notebook', () => {
  assert.equal(folderOf('papers/draft/analysis.ipynb'), 'papers/draft');
  assert.equal(folderOf('analysis.ipynb'), '');
  assert.equal(joinPath('papers/draft', 'tutoring_replication.py'), 'papers/draft/tutoring_replication.py');
  assert.equal(joinPath('', 'tutoring_replication.py'), 'tutoring_replication.py');
  assert.equal(replicationFileName('tutoring', ['analysis.ipynb']), 'tutoring_replication.py');
});

test('an existing script is never overwritten: -2, -3, ... are added', () => {
  const taken = ['tutoring_replication.py'];
  assert.equal(replicationFileName('tutoring', taken), 'tutoring_replication-2.py');
  taken.push('tutoring_replication-2.py');
  assert.equal(replicationFileName('tutoring', taken), 'tutoring_replication-3.py');
  // a gap is filled first, and other designs' scripts do not count
  assert.equal(
    replicationFileName('tutoring', ['tutoring_replication.py', 'tutoring_replication-3.py']),
    'tutoring_replication-2.py'
  );
  assert.equal(replicationFileName('grant', taken), 'grant_replication.py');
});

test('a design name becomes a safe file stem', () => {
  assert.equal(fileStem('grant 2024/main'), 'grant_2024_main');
  assert.equal(fileStem('../secret'), 'secret');
  assert.equal(fileStem('  '), 'design');
  assert.equal(fileStem('.hidden'), 'hidden');
  assert.equal(fileStem('wave-2.b'), 'wave-2.b');
});

test('paper table names: non-empty, short, printable', () => {
  assert.equal(tableNameProblem('main'), null);
  assert.equal(tableNameProblem('  robustness  '), null);
  assert.match(tableNameProblem('   ') ?? '', /Give the paper table a name/);
  assert.match(tableNameProblem('x'.repeat(MAX_TABLE_NAME + 1)) ?? '', /at most 60 characters; this one has 61/);
  assert.equal(tableNameProblem('x'.repeat(MAX_TABLE_NAME)), null);
  assert.match(tableNameProblem('a\tb') ?? '', /control characters/);
});

test('the code that reads a table quotes the name as Python text', () => {
  assert.equal(tableCode(' main '), "seamline.paper_tables['main']");
  assert.equal(tableCode("pupil's table"), "seamline.paper_tables['pupil\\'s table']");
});

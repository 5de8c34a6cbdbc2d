import assert from 'node:assert/strict';
import { test } from 'node:test';

import {
  IDesignForm,
  SpecError,
  designName,
  isIdentifier,
  specValue,
  uniqueName,
  validateDesignForm,
  writeDesignCell
} from '../src/spec';

test('design cells are recognised by their first line', () => {
  assert.equal(designName('%%cutoff tutoring\ndata: pupils'), 'tutoring');
  assert.equal(designName('\n  \n%%cutoff   tutoring  \n'), 'tutoring');
  assert.equal(designName('%%cutoff'), '');
  assert.equal(designName('%%cutoffs tutoring'), null);
  assert.equal(designName('x = 1\n%%cutoff tutoring'), null);
  assert.equal(designName('# %%cutoff tutoring'), null);
  assert.equal(designName(''), null);
  assert.equal(designName('%%cutoff a\r\ndata: b'), 'a');
});

test('board names are identifiers that are not keywords', () => {
  assert.ok(isIdentifier('tutoring_2'));
  assert.ok(!isIdentifier('2nd'));
  assert.ok(!isIdentifier('class'));
  assert.ok(!isIdentifier('my design'));
  assert.equal(uniqueName('design', []), 'design');
  assert.equal(uniqueName('design', ['design', 'design_2']), 'design_3');
});

test('column names are quoted only when the spec syntax needs it', () => {
  assert.equal(specValue('reading_score'), 'reading_score');
  assert.equal(specValue('<img src=x onerror=alert(1)>'), '<img src=x onerror=alert(1)>');
  assert.equal(specValue('score, raw'), "'score, raw'");
  assert.equal(specValue('rank #1'), "'rank #1'");
  assert.equal(specValue("pupil's score"), '"pupil\'s score"');
  assert.equal(specValue(' padded'), "' padded'");
  assert.throws(() => specValue('both \' and "'), SpecError);
  assert.throws(() => specValue('two\nlines'), SpecError);
  assert.throws(() => specValue(''), SpecError);
});

const FRAMES = [
  {
    name: 'pupils',
    columns: [
      { name: 'reading_score', numeric: true },
      { name: 'math_gain', numeric: true },
      { name: 'school', numeric: false }
    ]
  }
];
const FORM: IDesignForm = {
  name: 'tutoring',
  data: 'pupils',
  score: 'reading_score',
  outcome: 'math_gain',
  cutoff: ' 40 ',
  treated: 'below'
};

test('a filled form becomes a design cell in the spec syntax', () => {
  assert.deepEqual(validateDesignForm(FORM, FRAMES, []), []);
  assert.equal(
    writeDesignCell(FORM),
    '%%cutoff tutoring\ndata: pupils\nscore: reading_score\ncutoff: 40\n' +
      'treated: below\noutcome: math_gain'
  );
});

test('form problems are stated in words', () => {
  const problems = (changes: Partial<IDesignForm>, taken: string[] = []) =>
    validateDesignForm({ ...FORM, ...changes }, FRAMES, taken).join(' | ');
  assert.match(problems({ name: 'my design' }), /Python identifier/);
  assert.match(problems({}, ['tutoring']), /exists already/);
  assert.match(problems({ data: 'other' }), /Pick a DataFrame/);
  assert.match(problems({ score: 'school' }), /numeric score/);
  assert.match(problems({ outcome: 'reading_score' }), /different column/);
  for (const cutoff of ['forty', '', '1e', '--1', 'Infinity']) {
    assert.match(problems({ cutoff }), /cutoff must be a number/, cutoff);
  }
  for (const cutoff of ['-0.5', '.5', '1e3', '+2']) {
    assert.equal(problems({ cutoff }), '', cutoff);
  }
});

// The JS lint of the gate (scripts/check.sh): the page's modules and the browser tests, with
// ESLint's recommended rules. The page runs as ES modules in windows and workers; the tests and
// scripts run in Node.
import js from '@eslint/js';
import globals from 'globals';

export default [
  { ignores: ['www/pkg/**', 'dist/**', 'target/**', 'node_modules/**', '.tools/**'] },
  js.configs.recommended,
  {
    files: ['www/**/*.js'],
    languageOptions: { ecmaVersion: 2022, sourceType: 'module', globals: { ...globals.browser, ...globals.worker } },
  },
  {
    files: ['tests/**/*.mjs', 'scripts/**/*.mjs', 'eslint.config.js'],
    languageOptions: { ecmaVersion: 2022, sourceType: 'module', globals: { ...globals.node, ...globals.browser } },
  },
];

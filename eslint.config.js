import js from '@eslint/js';
import tseslint from 'typescript-eslint';

export default tseslint.config(
  { ignores: ['dist/**', 'node_modules/**', 'coverage/**'] },
  js.configs.recommended,
  ...tseslint.configs.recommended,
  {
    languageOptions: {
      // Node 20's globals that plain .mjs scripts use (TypeScript files are checked by tsc instead).
      globals: Object.fromEntries(
        ['process', 'console', 'Buffer', 'URL', 'setTimeout', 'clearTimeout', 'setInterval', 'clearInterval', 'setImmediate', 'fetch', 'FormData', 'Blob', 'AbortController', 'performance', 'TextEncoder', 'TextDecoder'].map((name) => [name, 'readonly']),
      ),
    },
    rules: {
      '@typescript-eslint/no-unused-vars': ['error', { argsIgnorePattern: '^_', varsIgnorePattern: '^_' }],
    },
  },
);

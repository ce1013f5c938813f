// Writes openapi/openapi.json from the API's zod schemas: `npm run openapi` after changing a route.
import { writeFileSync } from 'node:fs';
import { openapiDocument, openapiText } from '../src/api/openapi-document.js';

writeFileSync(new URL('../openapi/openapi.json', import.meta.url), openapiText(await openapiDocument()));
console.log('wrote openapi/openapi.json');

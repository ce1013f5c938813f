# syntax=docker/dockerfile:1
# cairn: `cairn serve` (the HTTP API) by default; `cairn worker` with the same image runs queued jobs.
# See docker-compose.yml for an API + Redis + workers setup, README.md (Configuration) for the settings.

# ---- build: compile TypeScript, then keep only the production dependencies ----
FROM node:20-bookworm-slim AS build
WORKDIR /app

# .npmrc must be in place before `npm ci`: it holds onnxruntime-node-install=skip, which stops
# onnxruntime-node's install script from downloading GPU (CUDA) files; the CPU binaries ship in
# the package itself.
COPY package.json package-lock.json .npmrc ./
# `npm ci` would also run the package's own `prepare` script (= `npm run build`), which needs the
# sources; dropping it in this throw-away stage lets the dependency layer stay cached while only
# sources change. The runtime stage copies the untouched package.json from the build context.
RUN npm pkg delete scripts.prepare \
 && npm ci --no-audit --no-fund

COPY tsconfig.json tsconfig.build.json ./
COPY src ./src
# tsc -p tsconfig.build.json: src/ -> dist/; then drop TypeScript, vitest, eslint and the other
# devDependencies so the runtime stage copies a production-only node_modules.
RUN npm run build \
 && npm prune --omit=dev --no-audit --no-fund

# ---- runtime ----
FROM node:20-bookworm-slim
WORKDIR /app

# Container defaults of settings read by src/config.ts: listen on every interface (the server still
# binds to 127.0.0.1 unless CAIRN_API_KEYS is set, so a keyless container is unreachable from
# outside), on 8080, with all state on the /data volume.
ENV CAIRN_DATA_DIR=/data CAIRN_HOST=0.0.0.0 CAIRN_PORT=8080 NODE_ENV=production

# Code and dependencies stay owned by root, so the service (user node) cannot modify them.
COPY --from=build /app/node_modules ./node_modules
COPY --from=build /app/dist ./dist
# package.json: "type": "module" for dist/, and the version the API reports.
COPY package.json ./

# A fresh named volume takes the ownership of the image's folder, so node can write to /data.
RUN mkdir -p /data && chown node:node /data
VOLUME ["/data"]

# The node images' unprivileged user (uid 1000).
USER node

EXPOSE 8080

# Slim images have no curl: probe /healthz with Node's built-in fetch. CAIRN_PORT is the one the
# server listens on (8080 unless overridden); 127.0.0.1 answers with and without API keys.
# `cairn worker` serves no HTTP: docker-compose.yml disables this check for workers.
HEALTHCHECK --interval=30s --timeout=5s --start-period=20s --retries=3 \
  CMD ["node", "-e", "fetch('http://127.0.0.1:' + (process.env.CAIRN_PORT || 8080) + '/healthz').then((r) => process.exit(r.ok ? 0 : 1), () => process.exit(1))"]

# package.json's bin `cairn`; the subcommand is the CMD (serve, worker, keygen --tenant NAME, select ...).
ENTRYPOINT ["node", "dist/cli/main.js"]
CMD ["serve"]

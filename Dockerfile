# Splitballot in a container: multi-stage build, a non-root user, the database on a volume, a health check.
# UNTESTED HERE: no Docker daemon was available where this file was written; build it once before relying on it.
#
#   docker build -t splitballot .
#   docker run -d --name splitballot -p 127.0.0.1:8080:8080 -v splitballot-data:/data splitballot
#   docker logs splitballot                       # the first start prints an admin key once
#   docker exec splitballot node dist/server/main.js keys create --scope ingest --experiment ID
#   docker exec splitballot node dist/server/main.js backup /data/backups/manual.db
#   docker exec splitballot node dist/server/main.js check
#   docker stop splitballot                       # SIGTERM: in-flight requests finish, the WAL is checkpointed
#
# Restore: stop the container first (restore refuses while the server holds /data/splitballot.db.lock), then
#   docker run --rm -v splitballot-data:/data splitballot node dist/server/main.js restore /data/backups/FILE.db
#
# HOST=0.0.0.0: inside the container the service must listen on the container's own interface, or the port
# published with -p cannot reach it (127.0.0.1 would be the container's private loopback). Exposure to the
# outside is then decided by `-p` (publish on 127.0.0.1 of the host and put a TLS reverse proxy in front).
# Behind such a proxy set SPLITBALLOT_TRUST_PROXY (e.g. 1) so that rate limits see the real client address.
#
# Build and runtime use the same Debian base so that better-sqlite3's native module matches the runtime.

FROM node:20-bookworm-slim AS build
WORKDIR /app
# Toolchain for better-sqlite3 in case no prebuilt binary can be downloaded.
RUN apt-get update \
 && apt-get install -y --no-install-recommends python3 make g++ \
 && rm -rf /var/lib/apt/lists/*
COPY package.json package-lock.json tsconfig.json ./
COPY types ./types
COPY server ./server
COPY stats ./stats
COPY migrations ./migrations
# npm ci runs "prepare" (tsc) once the sources are in place; then drop the dev dependencies.
RUN npm ci --no-audit --no-fund \
 && npm prune --omit=dev --no-audit --no-fund

FROM node:20-bookworm-slim
ENV NODE_ENV=production \
    HOST=0.0.0.0 \
    PORT=8080 \
    SPLITBALLOT_DB=/data/splitballot.db \
    SPLITBALLOT_BACKUP_DIR=/data/backups
WORKDIR /app
COPY --from=build /app/package.json ./package.json
COPY --from=build /app/node_modules ./node_modules
COPY --from=build /app/dist ./dist
COPY --from=build /app/migrations ./migrations
# The results page (HTML, script, style) is served from the source folder.
COPY --from=build /app/server/pages ./server/pages
# The image's files belong to root and are read-only for the service; only /data is writable (user node, uid 1000).
RUN mkdir -p /data/backups && chown -R node:node /data && chmod 700 /data
USER node
VOLUME ["/data"]
EXPOSE 8080
HEALTHCHECK --interval=30s --timeout=5s --start-period=20s --retries=3 \
  CMD node -e "fetch('http://127.0.0.1:' + (process.env.PORT || 8080) + '/healthz').then(r => process.exit(r.ok ? 0 : 1), () => process.exit(1))"
# `docker stop` sends SIGTERM and waits 10 s by default; the service needs up to SPLITBALLOT_SHUTDOWN_TIMEOUT
# (10 s) plus the checkpoint, so use `docker stop -t 20` (or stop_grace_period: 20s in compose).
STOPSIGNAL SIGTERM
CMD ["node", "dist/server/main.js", "serve"]

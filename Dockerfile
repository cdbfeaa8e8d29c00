# Splitballot in a container: a non-root user, the database on a volume, a health check.
#   docker build -t splitballot .
#   docker run -d -p 8080:8080 -v splitballot-data:/data --name splitballot splitballot
#   docker logs splitballot          # the first start prints an admin key once
#   docker exec splitballot node dist/server/main.js keys create --scope ingest --experiment ID
# Build and runtime use the same Debian base so that better-sqlite3's native module matches.

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
# npm ci runs "prepare" (tsc) once the sources are in place.
RUN npm ci --no-audit --no-fund \
 && npm prune --omit=dev --no-audit --no-fund

FROM node:20-bookworm-slim
ENV NODE_ENV=production \
    HOST=0.0.0.0 \
    PORT=8080 \
    SPLITBALLOT_DB=/data/splitballot.db
WORKDIR /app
COPY --from=build /app/package.json ./package.json
COPY --from=build /app/node_modules ./node_modules
COPY --from=build /app/dist ./dist
COPY --from=build /app/migrations ./migrations
RUN mkdir -p /data && chown node:node /data
USER node
VOLUME ["/data"]
EXPOSE 8080
HEALTHCHECK --interval=30s --timeout=5s --start-period=20s --retries=3 \
  CMD node -e "fetch('http://127.0.0.1:' + (process.env.PORT || 8080) + '/readyz').then(r => process.exit(r.ok ? 0 : 1), () => process.exit(1))"
# SIGTERM from `docker stop` shuts down gracefully (in-flight requests finish, the WAL is checkpointed).
STOPSIGNAL SIGTERM
CMD ["node", "dist/server/main.js", "serve"]

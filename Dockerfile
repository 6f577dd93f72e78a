# trueshift in one container: ingest, analyser, alert delivery, the API and the page.
# Build:  docker build -t trueshift .
# Run:    see docker-compose.yml (beside a Mosquitto broker with persistence on).
FROM node:20-bookworm-slim AS build
# better-sqlite3 12.x is compiled from source on install.
RUN apt-get update \
 && apt-get install -y --no-install-recommends python3 make g++ \
 && rm -rf /var/lib/apt/lists/*
WORKDIR /app
COPY . .
RUN npm ci && npm run build && npm prune --omit=dev

FROM node:20-bookworm-slim
WORKDIR /app
COPY --from=build /app /app
RUN mkdir -p /data && chown node:node /data
USER node
ENV NODE_ENV=production \
    TRUESHIFT_HTTP__HOST=0.0.0.0 \
    TRUESHIFT_STORE__PATH=/data/trueshift.db \
    TRUESHIFT_DROP__FOLDER=/data/drop
VOLUME /data
EXPOSE 8640
CMD ["node", "services/cli/bin/trueshift.js", "start"]

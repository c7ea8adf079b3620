# Bitbudget service: build with the SDK, run on the ASP.NET runtime as a non-root user.
# docker build -t bitbudget . && docker run -p 127.0.0.1:5080:8080 -v bitbudget-data:/data bitbudget
# The page's charting library, exactly as Service/Web/package-lock.json pins it.
FROM node:20-bookworm-slim AS web
WORKDIR /web
COPY Service/Web/package.json Service/Web/package-lock.json ./
RUN npm ci --no-audit --no-fund && touch node_modules/.installed-from-lock

FROM mcr.microsoft.com/dotnet/sdk:10.0 AS build
WORKDIR /src
COPY global.json Directory.Build.props Directory.Packages.props Search.sln ./
COPY Search/Search.csproj Search/
COPY Service/Service.csproj Service/
RUN dotnet restore Service/Service.csproj
COPY Search/ Search/
COPY Service/ Service/
COPY --from=web /web/node_modules Service/Web/node_modules
RUN dotnet publish Service/Service.csproj -c Release -o /app --no-restore

FROM mcr.microsoft.com/dotnet/aspnet:10.0
WORKDIR /app
COPY --from=build /app ./
# /blobs exists owned by the app user so a named volume mounted there (deploy/compose.yaml, shared by the
# API and the workers) starts writable.
RUN mkdir -p /data /blobs && chown "$APP_UID" /data /blobs
# Everything the service keeps (store, job queue, blobs, logs, generated API key) lives in /data.
VOLUME /data
ENV Bitbudget__DataFolder=/data \
    Bitbudget__Listen=http://0.0.0.0:8080 \
    DOTNET_gcServer=0
EXPOSE 8080
USER $APP_UID
ENTRYPOINT ["dotnet", "Bitbudget.Service.dll", "serve"]

using Bitbudget.Service.Api;
using Bitbudget.Service.Auth;
using Bitbudget.Service.Engine;
using Bitbudget.Service.Jobs;
using Bitbudget.Service.Problems;
using Bitbudget.Service.Searches;
using Bitbudget.Service.Store;
using Bitbudget.Service.Uploads;
using Hangfire;
using Hangfire.PostgreSql;
using Hangfire.Storage.SQLite;
using Microsoft.AspNetCore.Http.Timeouts;
using Microsoft.Extensions.DependencyInjection.Extensions;
using Microsoft.Extensions.Options;
using Serilog;

namespace Bitbudget.Service.Hosting;

/// <summary>Everything the host needs, registered in one place so Program.cs stays a screen long.</summary>
internal static class ServiceRegistration
{
    public static WebApplicationBuilder AddBitbudgetServices(this WebApplicationBuilder builder)
    {
        PrivateFiles.Apply();
        var services = builder.Services;
        var configured = builder.Configuration.GetSection(BitbudgetOptions.Section).Get<BitbudgetOptions>() ?? new BitbudgetOptions();
        services.AddOptions<BitbudgetOptions>().BindConfiguration(BitbudgetOptions.Section).ValidateOnStart();
        services.AddSingleton<IValidateOptions<BitbudgetOptions>, BitbudgetOptionsValidator>();
        builder.AddRequestSizeLimits();
        if (string.IsNullOrEmpty(builder.Configuration["urls"]))
        {
            builder.WebHost.UseUrls(configured.Listen);
        }

        services.AddSerilog((provider, logging) => logging
            .ReadFrom.Configuration(builder.Configuration)
            .MinimumLevel.Override("Microsoft.AspNetCore", Serilog.Events.LogEventLevel.Warning)
            .MinimumLevel.Override("Hangfire", Serilog.Events.LogEventLevel.Information)
            // A start-up refused for its configuration is told in one line by Program.cs, not with a stack trace here.
            .MinimumLevel.Override("Microsoft.Extensions.Hosting.Internal.Host", Serilog.Events.LogEventLevel.Fatal)
            .MinimumLevel.Override(typeof(Auth.ApiKeyAuthenticationHandler).FullName!, Serilog.Events.LogEventLevel.Warning)
            .Enrich.FromLogContext()
            .WriteTo.Console(outputTemplate: "[{Timestamp:HH:mm:ss} {Level:u3}] {SearchId} {Message:lj}{NewLine}{Exception}")
            .WriteTo.File(
                Path.Combine(provider.GetRequiredService<IOptions<BitbudgetOptions>>().Value.DataPath, "logs", "bitbudget-.log"),
                rollingInterval: RollingInterval.Day,
                retainedFileCountLimit: 14,
                outputTemplate: "{Timestamp:O} [{Level:u3}] {SearchId} {SourceContext}: {Message:lj}{NewLine}{Exception}"),
            // Each host keeps its own logger: with the default, the host's logger factory writes through the process-wide
            // Log.Logger, which the next host built in the process replaces and a disposed host closes, so a host's lines
            // went to another host's file or nowhere (seen as a flaky key-file test when test hosts run in parallel).
            preserveStaticLogger: true);

        services.ConfigureHttpJsonOptions(json =>
        {
            json.SerializerOptions.NumberHandling = System.Text.Json.Serialization.JsonNumberHandling.AllowNamedFloatingPointLiterals;
            json.SerializerOptions.Converters.Add(Bitbudget.Search.Planning.WireNames.JsonConverter);
        });
        services.AddBitbudgetProblems();
        services.AddBitbudgetAuth();
        services.AddRequestTimeouts(timeouts => timeouts.DefaultPolicy = new RequestTimeoutPolicy
        {
            Timeout = TimeSpan.FromSeconds(configured.RequestTimeoutSeconds),
            TimeoutStatusCode = StatusCodes.Status504GatewayTimeout,
        });
        services.AddBitbudgetOpenApi();

        services.AddBitbudgetStore();
        services.TryAddSingleton<ISearchEngine, EngineAdapter>();
        services.AddSingleton<UploadService>();
        services.AddSingleton<SearchService>();
        services.AddSingleton<SearchCancellations>();
        services.AddSingleton<SearchQueue>();
        services.AddSingleton<SearchRecovery>();
        services.AddTransient<SearchJob>();
        services.AddTransient<SweepPartJob>();
        services.AddSingleton<SweepParts>();
        // Before the Hangfire server so the store is migrated when the first job runs.
        services.AddHostedService<StartupTasks>();
        services.AddHostedService<RecoveryLoop>();
        services.AddBitbudgetJobs(configured.RunsJobs);
        return builder;
    }

    private static IServiceCollection AddBitbudgetStore(this IServiceCollection services)
    {
        services.AddSingleton(provider =>
        {
            var options = provider.GetRequiredService<IOptions<BitbudgetOptions>>().Value;
            if (options.Store == StoreKinds.Postgres)
            {
                return new Database(new PostgresDialect(options.ConnectionString!));
            }

            DataFolder.CreateDirectory(options.DataPath);
            DataFolder.CreatePrivateFile(Path.Combine(options.DataPath, "bitbudget.db"));
            return new Database(Path.Combine(options.DataPath, "bitbudget.db"));
        });
        services.AddSingleton(provider => new BlobStore(provider.GetRequiredService<IOptions<BitbudgetOptions>>().Value.BlobPath));
        services.AddSingleton<CatalogStore>();
        services.AddSingleton<SearchStore>();
        services.AddSingleton<SweepPartStore>();
        services.AddSingleton<TrialStatistics>();
        services.AddSingleton<StoreProbe>();
        return services;
    }

    private static IServiceCollection AddBitbudgetJobs(this IServiceCollection services, bool runsJobs)
    {
        services.AddHangfire((provider, hangfire) =>
        {
            var options = provider.GetRequiredService<IOptions<BitbudgetOptions>>().Value;
            hangfire
                .SetDataCompatibilityLevel(CompatibilityLevel.Version_180)
                .UseSimpleAssemblyNameTypeSerializer()
                .UseRecommendedSerializerSettings();
            if (options.Store == StoreKinds.Postgres)
            {
                // Hangfire's own tables in a schema of their own beside the store's, in the same database.
                hangfire.UsePostgreSqlStorage(
                    connection => connection.UseNpgsqlConnection(options.ConnectionString),
                    new PostgreSqlStorageOptions
                    {
                        SchemaName = "hangfire",
                        PrepareSchemaIfNecessary = true,
                        QueuePollInterval = TimeSpan.FromMilliseconds(options.QueuePollIntervalMs),
                        // A job fetched by a worker that then died becomes visible again after this long; the store's
                        // leases (Bitbudget:LeaseSeconds) hand its work to another worker long before that.
                        InvisibilityTimeout = TimeSpan.FromMinutes(30),
                    });
                return;
            }

            DataFolder.CreateDirectory(options.DataPath);
            DataFolder.CreatePrivateFile(Path.Combine(options.DataPath, "jobs.db"));
            hangfire.UseSQLiteStorage(Path.Combine(options.DataPath, "jobs.db"), new SQLiteStorageOptions
            {
                // The storage polls every 15 s by default, which leaves a new search waiting for nothing.
                QueuePollInterval = TimeSpan.FromMilliseconds(options.QueuePollIntervalMs),
            });
        });
        if (runsJobs)
        {
            services.AddHangfireServer((provider, server) =>
            {
                server.WorkerCount = provider.GetRequiredService<IOptions<BitbudgetOptions>>().Value.Workers;
                server.ServerName = $"{Environment.MachineName}:{Environment.ProcessId}";
            });
        }

        return services;
    }

    public static WebApplication UseBitbudgetPipeline(this WebApplication app)
    {
        app.UseBitbudgetProblems();
        app.UseRequestSizeGate();
        app.UseBitbudgetPage();
        app.UseAuthentication();
        app.UseAuthorization();
        app.UseStoreWriteGate();
        app.UseDashboardFormGuard();
        app.UseRequestTimeouts();
        return app;
    }

    /// <summary>The OpenAPI document at /openapi/v1.json and, when enabled, the Hangfire dashboard at /jobs behind the API keys.</summary>
    public static WebApplication MapBitbudgetExtras(this WebApplication app)
    {
        app.MapOpenApi().AllowAnonymous();
        if (app.Services.GetRequiredService<IOptions<BitbudgetOptions>>().Value.Dashboard)
        {
            app.MapHangfireDashboard("/jobs", new DashboardOptions { Authorization = [], AsyncAuthorization = [] }).RequireAuthorization();
        }

        return app;
    }
}

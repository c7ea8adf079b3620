using Bitbudget.Service.Auth;
using Bitbudget.Service.Engine;
using Bitbudget.Service.Jobs;
using Bitbudget.Service.Problems;
using Bitbudget.Service.Searches;
using Bitbudget.Service.Store;
using Bitbudget.Service.Uploads;
using Hangfire;
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
                outputTemplate: "{Timestamp:O} [{Level:u3}] {SearchId} {SourceContext}: {Message:lj}{NewLine}{Exception}"));

        services.ConfigureHttpJsonOptions(json =>
            json.SerializerOptions.NumberHandling = System.Text.Json.Serialization.JsonNumberHandling.AllowNamedFloatingPointLiterals);
        services.AddBitbudgetProblems();
        services.AddBitbudgetAuth();
        services.AddRequestTimeouts(timeouts => timeouts.DefaultPolicy = new RequestTimeoutPolicy
        {
            Timeout = TimeSpan.FromSeconds(configured.RequestTimeoutSeconds),
            TimeoutStatusCode = StatusCodes.Status504GatewayTimeout,
        });
        services.AddOpenApi();

        services.AddBitbudgetStore();
        services.TryAddSingleton<ISearchEngine, EngineAdapter>();
        services.AddSingleton<UploadService>();
        services.AddSingleton<SearchService>();
        services.AddSingleton<SearchCancellations>();
        services.AddSingleton<SearchQueue>();
        services.AddSingleton<SearchRecovery>();
        services.AddTransient<SearchJob>();
        // Before the Hangfire server so the store is migrated when the first job runs.
        services.AddHostedService<StartupTasks>();
        services.AddHostedService<RecoveryLoop>();
        services.AddBitbudgetJobs(configured.Workers);
        return builder;
    }

    private static IServiceCollection AddBitbudgetStore(this IServiceCollection services)
    {
        services.AddSingleton(provider =>
        {
            var data = provider.GetRequiredService<IOptions<BitbudgetOptions>>().Value.DataPath;
            DataFolder.CreateDirectory(data);
            DataFolder.CreatePrivateFile(Path.Combine(data, "bitbudget.db"));
            return new Database(Path.Combine(data, "bitbudget.db"));
        });
        services.AddSingleton(provider => new BlobStore(Path.Combine(provider.GetRequiredService<IOptions<BitbudgetOptions>>().Value.DataPath, "blobs")));
        services.AddSingleton<CatalogStore>();
        services.AddSingleton<SearchStore>();
        services.AddSingleton<TrialStatistics>();
        services.AddSingleton<StoreProbe>();
        return services;
    }

    private static IServiceCollection AddBitbudgetJobs(this IServiceCollection services, int workers)
    {
        services.AddHangfire((provider, hangfire) =>
        {
            var options = provider.GetRequiredService<IOptions<BitbudgetOptions>>().Value;
            DataFolder.CreateDirectory(options.DataPath);
            DataFolder.CreatePrivateFile(Path.Combine(options.DataPath, "jobs.db"));
            hangfire
                .SetDataCompatibilityLevel(CompatibilityLevel.Version_180)
                .UseSimpleAssemblyNameTypeSerializer()
                .UseRecommendedSerializerSettings()
                .UseSQLiteStorage(Path.Combine(options.DataPath, "jobs.db"), new SQLiteStorageOptions
                {
                    // The storage polls every 15 s by default, which leaves a new search waiting for nothing.
                    QueuePollInterval = TimeSpan.FromMilliseconds(options.QueuePollIntervalMs),
                });
        });
        if (workers > 0)
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

using Bitbudget.Service.Api;
using Bitbudget.Service.Commands;
using Bitbudget.Service.Hosting;

// Verbs (inspect, plan, demo, help), help and --version run here and never start the service; no verb, or
// "serve", or only host settings (--urls, --Bitbudget:NAME=VALUE) start the HTTP service.
if (!CommandLine.StartsService(args))
{
    return await CommandLine.RunAsync(args);
}

try
{
    var builder = WebApplication.CreateBuilder(CommandLine.HostArguments(args));
    builder.AddBitbudgetServices();

    var app = builder.Build();
    app.UseBitbudgetPipeline();
    app.MapOperationsApi();
    // A worker serves only /healthz and /metrics: searches are submitted to and read from the API processes.
    if (app.Services.GetRequiredService<Microsoft.Extensions.Options.IOptions<BitbudgetOptions>>().Value.ServesApi)
    {
        app.MapModelsApi();
        app.MapDatasetsApi();
        app.MapSearchesApi();
        app.MapBitbudgetExtras();
    }

    await app.RunAsync();
    return 0;
}
catch (Exception e) when (System.Reflection.Assembly.GetEntryAssembly() == typeof(Program).Assembly && StartupFailure.Describe(e) is { } lines)
{
    // A setting out of range or a key file others can read: one line each, and an exit code, not a core dump.
    // (Hosted by another program, such as the functional tests' WebApplicationFactory, the exception goes to it.)
    foreach (var line in lines)
    {
        await Console.Error.WriteLineAsync("error: " + line);
    }

    return StartupFailure.ExitCode;
}

/// <summary>Entry point type, public so functional tests can host it.</summary>
public partial class Program;

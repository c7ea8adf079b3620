using Bitbudget.Service.Api;
using Bitbudget.Service.Commands;
using Bitbudget.Service.Hosting;

// Command-line verbs (inspect, plan, demo) run the engine locally; no verb (or "serve") starts the service.
if (CommandLine.IsCommand(args))
{
    return await CommandLine.RunAsync(args);
}

if (CommandLine.UnknownVerb(args) is { } unknown)
{
    await Console.Error.WriteLineAsync(unknown);
    return 2;
}

var builder = WebApplication.CreateBuilder(CommandLine.HostArguments(args));
builder.AddBitbudgetServices();

var app = builder.Build();
app.UseBitbudgetPipeline();
app.MapOperationsApi();
app.MapModelsApi();
app.MapDatasetsApi();
app.MapSearchesApi();
app.MapBitbudgetExtras();
await app.RunAsync();
return 0;

/// <summary>Entry point type, public so functional tests can host it.</summary>
public partial class Program;

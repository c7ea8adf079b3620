using Bitbudget.Service.Commands;

// Command-line verbs (inspect, plan, demo) run the engine locally; no verb (or "serve") starts the service.
if (CommandLine.IsCommand(args))
{
    return await CommandLine.RunAsync(args);
}

Console.Error.WriteLine("The HTTP service is not wired yet; use a command: inspect MODEL.onnx");
return 2;

/// <summary>Entry point type, public so functional tests can host it.</summary>
public partial class Program;

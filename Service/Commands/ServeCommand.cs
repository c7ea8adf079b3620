using System.CommandLine;

namespace Bitbudget.Service.Commands;

/// <summary>
/// <c>serve</c>: documents the HTTP service's options for help. Program.cs starts the service itself
/// (<see cref="CommandLine.StartsService"/>), so this command's action only runs for help.
/// </summary>
internal static class ServeCommand
{
    public static readonly IReadOnlyList<string> Examples =
    [
        $"{CommandLine.ProgramName} serve",
        $"BITBUDGET_API_KEYS=my-key {CommandLine.ProgramName} serve --urls http://127.0.0.1:6000 --Bitbudget:DataFolder=/srv/bitbudget",
        $"{CommandLine.ProgramName} serve --Bitbudget:Workers=2",
    ];

    public static Command Create()
    {
        var serve = new Command(
            CommandLine.Serve,
            "Runs the HTTP service (also what no verb does). Data under ./data; API keys from BITBUDGET_API_KEYS, or with none set one written to <data>/api-key at first start. " +
            "Any setting of README's settings table can be given as --Bitbudget:NAME=VALUE. A start-up the settings refuse exits 78 with one line (a busy address included).")
        {
            new Option<string>("--urls") { HelpName = "URL", Description = "Where to listen.", DefaultValueFactory = _ => "http://127.0.0.1:5080" },
            new Option<string>("--Bitbudget:DataFolder") { HelpName = "DIR", Description = "Where the store, blobs, key and logs live.", DefaultValueFactory = _ => "./data" },
            new Option<int>("--Bitbudget:Workers") { HelpName = "N", Description = "Searches run at once in this process (0: API only).", DefaultValueFactory = _ => 1 },
        };
        serve.TreatUnmatchedTokensAsErrors = false;
        serve.SetAction(_ => ExitCodes.Done);
        return serve;
    }
}

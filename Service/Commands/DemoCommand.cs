using System.CommandLine;
using System.Globalization;
using Bitbudget.Service.Demo;

namespace Bitbudget.Service.Commands;

/// <summary>
/// "demo [--out DIR] [--version N]": writes the invented hive-monitor scenario (model, calibration set, held-out
/// set, README) into DIR (default ./demo) and reports training progress and the FP32 accuracy. Version N > 1 is
/// a retrain of the same model on the same data (another seed), for comparing the searches of two versions.
/// </summary>
internal static class DemoCommand
{
    public static readonly IReadOnlyList<string> Examples =
    [
        $"{CommandLine.ProgramName} demo",
        $"{CommandLine.ProgramName} demo --out /tmp/hive",
        $"{CommandLine.ProgramName} demo --out demo-v2 --version 2",
    ];

    public static Command Create()
    {
        var output = new Option<string>("--out") { HelpName = "DIR", Description = "The folder to write into (created if missing).", DefaultValueFactory = _ => "demo" };
        // The model's version, not the program's: the program's --version belongs to the top level only.
        var version = new Option<int>("--version")
        {
            HelpName = "N",
            Description = "Write a retrain of the model (the same data, seeds moved by N - 1), to compare the searches of two versions.",
            DefaultValueFactory = _ => 1,
        };
        version.CustomParser = result =>
        {
            var text = result.Tokens.Count == 1 ? result.Tokens[0].Value : string.Join(' ', result.Tokens.Select(t => t.Value));
            if (int.TryParse(text, NumberStyles.None, CultureInfo.InvariantCulture, out var n) && n >= 1)
            {
                return n;
            }

            result.AddError($"--version takes a whole number of 1 or more, not '{text}'.");
            return 0;
        };
        var demo = new Command("demo", "Trains the invented hive-monitor demo model (seconds, deterministic) and writes it with a calibration set, a held-out set and a README.")
        {
            output,
            version,
        };
        demo.SetAction(result => Run(result.GetRequiredValue(output), result.GetValue(version)));
        return demo;
    }

    private static int Run(string outputFolder, int version)
    {
        CultureInfo invariant = CultureInfo.InvariantCulture;
        Console.WriteLine(string.Create(invariant, $"Hive monitor demo (invented setting): training a 4-state classifier on synthetic hive sound{(version > 1 ? $" (retrain, version {version})" : "")}"));
        Console.WriteLine(string.Create(invariant, $"  {HiveMonitorScenario.TrainingCount} training patches, {HiveMonitorScenario.Epochs} epochs, batch {HiveMonitorScenario.BatchSize}, Adam"));

        DemoResult result;
        try
        {
            result = HiveMonitorScenario.Generate(outputFolder, epoch =>
                Console.WriteLine(string.Create(invariant, $"  epoch {epoch.Epoch,2}/{HiveMonitorScenario.Epochs}  loss {epoch.Loss:F4}  train accuracy {epoch.Accuracy * 100:F1}%")),
                version);
        }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException)
        {
            Console.Error.WriteLine($"error: {FileErrors.CannotWrite(outputFolder, e)}");
            return ExitCodes.BadFile;
        }

        Console.WriteLine(string.Create(invariant, $"FP32 accuracy on the held-out set: {result.HoldoutAccuracy * 100:F1}% ({result.Holdout.Count} patches)"));
        Console.WriteLine("Wrote:");
        foreach (DemoFile file in result.Files)
        {
            Console.WriteLine(string.Create(invariant, $"  {file.Path} ({file.SizeBytes:N0} bytes): {file.Contents}"));
        }

        // CPU time beside wall time: on a shared machine the wall clock says little about the work done.
        double cpuSeconds = System.Diagnostics.Process.GetCurrentProcess().TotalProcessorTime.TotalSeconds;
        Console.WriteLine(string.Create(invariant, $"Took {result.Elapsed.TotalSeconds:F1} s ({cpuSeconds:F1} s CPU for the whole process)"));
        return ExitCodes.Done;
    }
}

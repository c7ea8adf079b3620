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
    private const string Usage = "usage: demo [--out DIR] [--version N]   (writes the hive-monitor demo model and data sets; DIR defaults to ./demo; N > 1 writes a retrain of the model, seeds moved by N - 1)";

    public static Task<int> RunAsync(string[] args)
    {
        string outputFolder = "demo";
        int version = 1;
        for (int i = 0; i < args.Length; i++)
        {
            switch (args[i])
            {
                case "--out" when i + 1 < args.Length:
                    outputFolder = args[++i];
                    break;
                case "--version" when i + 1 < args.Length:
                    if (!int.TryParse(args[++i], NumberStyles.None, CultureInfo.InvariantCulture, out version) || version < 1)
                    {
                        Console.Error.WriteLine($"demo: --version takes a whole number of 1 or more, not '{args[i]}'.");
                        return Task.FromResult(2);
                    }

                    break;
                case "--help" or "-h":
                    Console.WriteLine(Usage);
                    return Task.FromResult(0);
                default:
                    Console.Error.WriteLine(args[i] is "--out" or "--version"
                        ? $"demo: {args[i]} needs a value after it."
                        : $"demo: unknown argument '{args[i]}'.");
                    Console.Error.WriteLine(Usage);
                    return Task.FromResult(2);
            }
        }

        CultureInfo invariant = CultureInfo.InvariantCulture;
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture, $"Hive monitor demo (invented setting): training a 4-state classifier on synthetic hive sound{(version > 1 ? $" (retrain, version {version})" : "")}"));
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
            Console.Error.WriteLine($"demo: cannot write to '{outputFolder}': {e.Message}");
            return Task.FromResult(1);
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
        return Task.FromResult(0);
    }
}

using System.CommandLine;
using Bitbudget.Search;
using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Manifest;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Planning;

namespace Bitbudget.Service.Commands;

/// <summary>
/// <c>plan</c>: the whole search locally, writing the manifest, the quantized model, the sensitivity CSV, the
/// frontier and the trials into <c>--out</c>, with progress on standard error and a summary on standard output.
/// Sensitivity trials are read from and written to the user's trial cache (<see cref="TrialCache"/>) unless
/// <c>--no-cache</c> is given.
/// </summary>
internal static class PlanCommand
{
    /// <summary>Engine refusals that mean the arguments, not a file, are wrong (a width, a layer or output name, a budget out of range).</summary>
    private static readonly HashSet<string> ArgumentCodes = new(StringComparer.Ordinal) { "settings-invalid", "budget-invalid" };

    public static readonly IReadOnlyList<string> Examples =
    [
        $"{CommandLine.ProgramName} plan --model demo/hive-monitor.onnx --data demo/calibration.npz --budget \"sqnr>=30\" --bits 2,3,4,6,8 --out demo/plan",
        $"{CommandLine.ProgramName} plan --model m.onnx --data d.npz --budget \"top1>=0.99\" --pin conv1=8 --exclude fc2",
        $"{CommandLine.ProgramName} plan --model m.onnx --data d.npz --budget \"bytes<=2500000\" --storage packed --quiet",
    ];

    public static Command Create()
    {
        var options = new PlanOptions();
        var plan = new Command("plan", "Runs a whole search locally: measures each layer at each candidate width with ONNX Runtime, picks the assignment, checks it end to end and writes manifest.json, model.quantized.onnx, sensitivity.csv, frontier.json and trials.json.");
        foreach (var option in options.All)
        {
            plan.Options.Add(option);
        }

        plan.SetAction(result =>
        {
            PlanArguments parsed;
            try
            {
                parsed = PlanArguments.From(result, options);
            }
            catch (ArgumentException e)
            {
                return ArgumentError(e.Message);
            }

            var mode = parsed.Quiet ? PlanProgress.Mode.Quiet : Console.IsErrorRedirected ? PlanProgress.Mode.Lines : PlanProgress.Mode.Terminal;
            return Run(parsed, mode);
        });
        return plan;
    }

    /// <summary>Runs a parsed plan; every failure is one <c>error:</c> line and an exit code, never an exception.</summary>
    internal static int Run(PlanArguments args, PlanProgress.Mode progressMode)
    {
        var progress = new PlanProgress(Console.Error, progressMode);
        try
        {
            return Search(args, progress);
        }
        catch (EngineException e) when (ArgumentCodes.Contains(e.Code))
        {
            progress.Finish();
            return ArgumentError(e.Message);
        }
        catch (EngineException e)
        {
            progress.Finish();
            Console.Error.WriteLine($"error: {e.Message}");
            return ExitCodes.BadFile;
        }
        catch (OutputFolderException e)
        {
            progress.Finish();
            Console.Error.WriteLine($"error: {e.Message}");
            return ExitCodes.BadFile;
        }
    }

    private static int ArgumentError(string message)
    {
        Console.Error.WriteLine($"error: {message}");
        Console.Error.WriteLine($"Run '{CommandLine.ProgramName} plan --help' for the options and examples.");
        return ExitCodes.BadArguments;
    }

    private static int Search(PlanArguments args, PlanProgress progress)
    {
        var model = OnnxModel.LoadFile(args.Model, args.Settings.TargetOpset);
        var (data, dataSha256) = ReadDataset("the dataset (--data)", args.Data, model, args.Settings);
        var holdout = args.Holdout is null ? null : ReadDataset("the held-out set (--holdout)", args.Holdout, model, args.Settings).Set;

        // Before the search, so a long search never ends in an error about where to put its results.
        OutputFolder.CheckWritable(args.Out);
        var sessionOptions = new TrialSessionOptions(MaxSweepMemoryBytes: args.MaxSweepMemoryBytes);
        var store = args.NoCache
            ? TrialCache.Off()
            : TrialCache.Open(TrialCache.Folder(), TrialContext.Of(model.Sha256, dataSha256, args.Settings, sessionOptions));
        var clock = System.Diagnostics.Stopwatch.StartNew();
        var result = SearchRunner.Run(model, data, args.Settings, store, progress, CancellationToken.None, sessionOptions, holdout);
        progress.Finish();

        OutputFolder.Write(args.Out, folder =>
        {
            File.WriteAllBytes(Path.Combine(folder, "manifest.json"), result.ManifestJson);
            File.WriteAllText(Path.Combine(folder, "sensitivity.csv"), result.SensitivityCsv);
            File.WriteAllText(Path.Combine(folder, "frontier.json"), result.FrontierJson);
            File.WriteAllBytes(Path.Combine(folder, "trials.json"), ManifestJson.Serialize(Trials(store)));
            if (result.QuantizedModel is { } quantized)
            {
                File.WriteAllBytes(Path.Combine(folder, "model.quantized.onnx"), quantized);
            }
        });

        var manifest = ManifestJson.Deserialize(result.ManifestJson);
        Console.Out.Write(PlanSummary.Write(manifest, result, args.Settings.Budget));
        // The count is the manifest's and trials.json's (every trial the result rests on); what this run paid for is the measured part.
        var reused = store.Reused > 0 ? $" ({result.TrialCount - store.Reused} measured, {store.Reused} sensitivity trials reused from the trial cache {store.File})" : string.Empty;
        Console.Out.WriteLine($"{result.TrialCount} trials{reused} in {clock.Elapsed.TotalSeconds:0.0} s; artifacts in {Path.GetFullPath(args.Out)}");
        if (result.SweepNote is { } sweep)
        {
            Console.Out.WriteLine($"sweep: {sweep}");
        }

        if (store.Problem is { } problem)
        {
            Console.Error.WriteLine($"warning: {problem}");
        }

        return result.Feasible ? ExitCodes.Done : ExitCodes.BudgetNotMet;
    }

    /// <summary>The dataset and the SHA-256 of its bytes (the trial cache's key), from one read of the file.</summary>
    private static (CalibrationSet Set, string Sha256) ReadDataset(string what, string path, OnnxModel model, SearchSettings settings)
    {
        byte[] bytes;
        try
        {
            bytes = File.ReadAllBytes(path);
        }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException)
        {
            throw new EngineException("dataset-unreadable", FileErrors.CannotRead(what, path, e), e);
        }

        try
        {
            return (CalibrationSet.Create(DatasetReader.Read(bytes), model.Inputs, settings.SampleAxes), TrialContext.HashBytes(bytes));
        }
        catch (EngineException e) when (!ArgumentCodes.Contains(e.Code))
        {
            throw new EngineException(e.Code, $"{char.ToUpperInvariant(what[0])}{what[1..]} '{path}' is refused: {char.ToLowerInvariant(e.Message[0])}{e.Message[1..]}", e);
        }
    }

    /// <summary>
    /// The stored trials in key order, each as one item of the API's trial pages (GET /v1/searches/{id}/trials):
    /// key, kind, metrics, duration and the assignment it measured.
    /// </summary>
    private static List<TrialRecord> Trials(ITrialStore store) =>
        store.LoadAll().Values.OrderBy(t => t.Key, StringComparer.Ordinal).ToList();
}

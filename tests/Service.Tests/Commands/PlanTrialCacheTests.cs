using System.Text.Json;
using Bitbudget.Service.Demo;
using Google.Protobuf;
using P = global::Onnx;

namespace Bitbudget.Service.Tests.Commands;

/// <summary>
/// <c>plan</c>'s trial cache on the demo: a second plan with only another budget reads every sensitivity trial
/// from the cache and gives the same sensitivities; a changed model byte, another dataset, another setting and
/// <c>--no-cache</c> each measure the whole sweep again.
/// </summary>
[Collection(ConsoleCollection.Name)]
public sealed class PlanTrialCacheTests(PlanDemoFixture fixture) : IClassFixture<PlanDemoFixture>, IDisposable
{
    // The demo has 4 layers; bits 2,4,8 make 12 sensitivity trials.
    private const int SweepTrials = 12;

    private readonly string cacheHome = Directory.CreateTempSubdirectory("bitbudget-cache-test-").FullName;
    private readonly string? previousCacheHome = Environment.GetEnvironmentVariable("XDG_CACHE_HOME");

    private string TrialFolder => Path.Combine(cacheHome, "bitbudget", "trials");

    [Fact]
    public async Task ASecondPlanWithAnotherBudgetReusesTheWholeSweepAndGivesTheSameSensitivities()
    {
        Environment.SetEnvironmentVariable("XDG_CACHE_HOME", cacheHome);
        var first = await PlanAsync("first", "sqnr>=25");
        Assert.DoesNotContain("reused", first.Out, StringComparison.Ordinal);
        var cacheFile = Assert.Single(Directory.GetFiles(TrialFolder));
        Assert.Equal(SweepTrials, File.ReadAllLines(cacheFile).Length);

        var second = await PlanAsync("second", "sqnr>=15");

        // The count is every trial the plan rests on, as in the manifest and trials.json; what it measured is the rest.
        var manifest = JsonDocument.Parse(File.ReadAllBytes(Out("second", "manifest.json"))).RootElement;
        var trials = manifest.GetProperty("trials").GetInt32();
        Assert.Contains($"{trials} trials ({trials - SweepTrials} measured, {SweepTrials} sensitivity trials reused from the trial cache {cacheFile})", second.Out, StringComparison.Ordinal);
        var listed = JsonDocument.Parse(File.ReadAllBytes(Out("second", "trials.json"))).RootElement.EnumerateArray().ToList();
        Assert.Equal(trials, listed.Count);
        Assert.Equal(SweepTrials, listed.Count(t => t.GetProperty("reusedFrom").GetString() == cacheFile));
        Assert.All(listed.Where(t => t.GetProperty("reusedFrom").ValueKind == JsonValueKind.Null), t => Assert.NotEqual("sensitivity", t.GetProperty("kind").GetString()));
        // Nothing new was swept: the cache file still holds the first run's lines only.
        Assert.Equal(SweepTrials, File.ReadAllLines(cacheFile).Length);
        Assert.Equal(File.ReadAllText(Out("first", "sensitivity.csv")), File.ReadAllText(Out("second", "sensitivity.csv")));
        Assert.Equal(Sensitivities("first"), Sensitivities("second"));
        Assert.NotEqual(File.ReadAllBytes(Out("first", "manifest.json")), File.ReadAllBytes(Out("second", "manifest.json")));
    }

    [Fact]
    public async Task AChangedModelByteAnotherDatasetOrAnotherSettingMissesTheCache()
    {
        Environment.SetEnvironmentVariable("XDG_CACHE_HOME", cacheHome);
        await PlanAsync("warm", "sqnr>=25");

        var changedModel = Path.Combine(cacheHome, "changed.onnx");
        File.WriteAllBytes(changedModel, WithOneWeightNudged(File.ReadAllBytes(fixture.ModelPath)));
        var holdout = Path.Combine(fixture.Folder, HiveMonitorScenario.HoldoutFileName);
        var misses = new[]
        {
            await PlanOnAsync("model", "sqnr>=25", changedModel, fixture.CalibrationPath),
            await PlanOnAsync("dataset", "sqnr>=25", fixture.ModelPath, holdout),
            await PlanAsync("scheme", "sqnr>=25", "--scheme", "asymmetric"),
            await PlanAsync("opset", "sqnr>=25", "--target-opset", "21"),
        };

        Assert.All(misses, run => Assert.DoesNotContain("reused", run.Out, StringComparison.Ordinal));
        Assert.Equal(1 + misses.Length, Directory.GetFiles(TrialFolder).Length);
    }

    [Fact]
    public async Task NoCacheMeasuresEverythingAndWritesNoCacheFile()
    {
        Environment.SetEnvironmentVariable("XDG_CACHE_HOME", cacheHome);
        await PlanAsync("warm", "sqnr>=25");

        var run = await PlanAsync("uncached", "sqnr>=15", "--no-cache");

        Assert.DoesNotContain("reused", run.Out, StringComparison.Ordinal);
        Assert.Single(Directory.GetFiles(TrialFolder));
        Assert.Equal(File.ReadAllText(Out("warm", "sensitivity.csv")), File.ReadAllText(Out("uncached", "sensitivity.csv")));
    }

    public void Dispose()
    {
        Environment.SetEnvironmentVariable("XDG_CACHE_HOME", previousCacheHome);
        Directory.Delete(cacheHome, recursive: true);
    }

    private Task<CommandRun> PlanAsync(string name, string budget, params string[] extra) =>
        PlanOnAsync(name, budget, fixture.ModelPath, fixture.CalibrationPath, extra);

    private async Task<CommandRun> PlanOnAsync(string name, string budget, string model, string data, params string[] extra)
    {
        var run = await CommandRun.RunAsync(
            ["plan", "--model", model, "--data", data, "--budget", budget, "--bits", "2,4,8", "--out", Out(name), .. extra]);
        Assert.True(run.ExitCode == 0, run.ToString());
        return run;
    }

    private string Out(string name, string? file = null) =>
        file is null ? Path.Combine(cacheHome, "out-" + name) : Path.Combine(cacheHome, "out-" + name, file);

    /// <summary>The sensitivity trials of trials.json, key and SQNR, in key order.</summary>
    private List<string> Sensitivities(string name)
    {
        using var trials = JsonDocument.Parse(File.ReadAllBytes(Out(name, "trials.json")));
        var sensitivities = trials.RootElement.EnumerateArray()
            .Where(t => t.GetProperty("kind").GetString() == "sensitivity")
            .Select(t => $"{t.GetProperty("key").GetString()} {t.GetProperty("metrics").GetRawText()}")
            .ToList();
        Assert.Equal(SweepTrials, sensitivities.Count);
        return sensitivities;
    }

    /// <summary>The model with the lowest mantissa bit of one weight flipped: a one-byte change that still loads.</summary>
    private static byte[] WithOneWeightNudged(byte[] model)
    {
        var proto = P.ModelProto.Parser.ParseFrom(model);
        var weight = proto.Graph.Initializer.First(t => t.RawData.Length >= 4);
        var raw = weight.RawData.ToByteArray();
        raw[0] ^= 1;
        weight.RawData = ByteString.CopyFrom(raw);
        return proto.ToByteArray();
    }
}

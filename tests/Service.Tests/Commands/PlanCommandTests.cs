using System.Text.Json;
using Bitbudget.Service.Demo;
using Bitbudget.Service.Tests.Support;
using P = global::Onnx;

namespace Bitbudget.Service.Tests.Commands;

/// <summary>
/// <c>plan</c> run in-process on the generated demo. Outside check: ONNX Runtime (Microsoft.ML.OnnxRuntime)
/// loads the written QDQ model, and the SQNR of its outputs against ONNX Runtime's outputs of the FP32
/// model, computed here from scratch, must equal what the manifest claims.
/// </summary>
[Collection(ConsoleCollection.Name)]
public sealed class PlanCommandTests(PlanDemoFixture fixture) : IClassFixture<PlanDemoFixture>
{
    private static readonly string[] Artifacts = ["manifest.json", "model.quantized.onnx", "sensitivity.csv", "frontier.json", "trials.json"];

    [Fact]
    public void PlanOnTheDemoExitsZeroAndWritesEveryArtifact()
    {
        var run = fixture.Plan;
        Assert.True(run.ExitCode == 0, run.ToString());
        Assert.Empty(run.ErrorLinesStartingWithError);
        foreach (var name in Artifacts)
        {
            var path = Path.Combine(fixture.PlanFolder, name);
            Assert.True(File.Exists(path) && new FileInfo(path).Length > 0, $"{name} is missing or empty.\n{run}");
        }

        using var manifest = ReadJson("manifest.json");
        var layers = manifest.RootElement.GetProperty("layers");
        Assert.Equal(4, layers.GetArrayLength());
        Assert.All(layers.EnumerateArray(), l => Assert.Contains(l.GetProperty("bits").GetInt32(), new[] { 2, 4, 8 }));
        Assert.True(manifest.RootElement.GetProperty("outcome").GetProperty("feasible").GetBoolean());

        // One CSV row per layer and candidate width, after the header.
        var csv = File.ReadAllLines(Path.Combine(fixture.PlanFolder, "sensitivity.csv"));
        Assert.StartsWith("layer,op,parameters,bits", csv[0], StringComparison.Ordinal);
        Assert.Equal(1 + (4 * 3), csv.Length);

        using var trials = ReadJson("trials.json");
        Assert.Equal(manifest.RootElement.GetProperty("trials").GetInt32(), trials.RootElement.GetArrayLength());

        // One trial format: each item of trials.json is an item of the API's trial pages, the assignment included.
        Assert.All(trials.RootElement.EnumerateArray(), t => Assert.Equal(Api.TrialPagesTests.TrialProperties, t.EnumerateObject().Select(p => p.Name)));
        var layerNames = manifest.RootElement.GetProperty("layers").EnumerateArray().Select(l => l.GetProperty("name").GetString()!).Order().ToList();
        Assert.All(
            trials.RootElement.EnumerateArray().Where(t => t.GetProperty("kind").GetString() == "validation"),
            t => Assert.Equal(layerNames, t.GetProperty("assignment").EnumerateObject().Select(p => p.Name).Order().ToList()));
        Assert.Contains(trials.RootElement.EnumerateArray(), t => t.GetProperty("assignment").EnumerateObject().Any(p => p.Value.GetProperty("granularity").GetString() == "per-channel"));
        using var frontier = ReadJson("frontier.json");
        Assert.True(frontier.RootElement.GetProperty("points").GetArrayLength() > 1);
        Assert.Contains("25.", run.Out, StringComparison.Ordinal);
    }

    [Fact]
    public void QuantizedModelRunsInOnnxRuntimeAndGivesTheSqnrTheManifestClaims()
    {
        using var manifest = ReadJson("manifest.json");
        var claimed = manifest.RootElement.GetProperty("totals").GetProperty("metrics").GetProperty("sqnrDb").GetDouble();
        Assert.True(claimed >= 25, $"The manifest claims {claimed} dB against a 25 dB budget.");

        var quantizedBytes = File.ReadAllBytes(Path.Combine(fixture.PlanFolder, "model.quantized.onnx"));
        var proto = P.ModelProto.Parser.ParseFrom(quantizedBytes);
        Assert.Equal(
            manifest.RootElement.GetProperty("layers").GetArrayLength(),
            proto.Graph.Node.Count(n => n.OpType == "DequantizeLinear"));

        var calibration = fixture.Demo.Calibration;
        Assert.Equal(HiveMonitorScenario.CalibrationCount * 256, calibration.Spectrograms.Length);
        var sqnrDb = OutputSqnr.Db(File.ReadAllBytes(fixture.ModelPath), quantizedBytes, HiveNetExporter.InputName, calibration.Spectrograms, calibration.Shape);
        Assert.True(Math.Abs(sqnrDb - claimed) <= 0.01, $"ONNX Runtime gives {sqnrDb:F4} dB; the manifest claims {claimed:F4} dB.");
    }

    [Theory]
    [InlineData("sqnr<=30", "sqnr>=30")]
    [InlineData("foo>=1", "sqnr>=30")]
    public async Task BadBudgetExits2WithOneErrorLineNamingTheRightForm(string budget, string rightForm)
    {
        var run = await CommandRun.RunAsync(
            "plan", "--model", fixture.ModelPath, "--data", fixture.CalibrationPath, "--budget", budget, "--out", Path.Combine(fixture.Folder, "bad"));

        Assert.True(run.ExitCode == 2, run.ToString());
        var line = Assert.Single(run.ErrorLinesStartingWithError);
        Assert.Contains(rightForm, line, StringComparison.Ordinal);
        Assert.Contains(budget.Split('<', '>')[0], line, StringComparison.Ordinal);
        Assert.False(Directory.Exists(Path.Combine(fixture.Folder, "bad")), "A refused budget must write nothing.");
    }

    [Fact]
    public async Task InfeasibleBudgetExits3AndSaysWhy()
    {
        var outFolder = Path.Combine(fixture.Folder, "infeasible");
        var run = await CommandRun.RunAsync(
            "plan", "--model", fixture.ModelPath, "--data", fixture.CalibrationPath, "--budget", "sqnr>=150", "--bits", "2,4,8", "--out", outFolder);

        Assert.True(run.ExitCode == 3, run.ToString());
        Assert.Contains("Infeasible", run.Out, StringComparison.Ordinal);
        Assert.Contains("150.0 dB", run.Out, StringComparison.Ordinal);
        using var manifest = JsonDocument.Parse(File.ReadAllBytes(Path.Combine(outFolder, "manifest.json")));
        Assert.False(manifest.RootElement.GetProperty("outcome").GetProperty("feasible").GetBoolean());
        Assert.Contains(manifest.RootElement.GetProperty("outcome").GetProperty("message").GetString()!, run.Out, StringComparison.Ordinal);
        Assert.Equal(JsonValueKind.Null, manifest.RootElement.GetProperty("totals").ValueKind);
        Assert.False(File.Exists(Path.Combine(outFolder, "model.quantized.onnx")));
    }

    [Fact]
    public async Task TargetOpsetBelowTheModelsOpsetExits1AndWritesNothing()
    {
        var outFolder = Path.Combine(fixture.Folder, "lower-opset");
        var run = await CommandRun.RunAsync(
            "plan", "--model", fixture.ModelPath, "--data", fixture.CalibrationPath, "--budget", "sqnr>=25", "--target-opset", "13", "--out", outFolder);

        Assert.True(run.ExitCode == 1, run.ToString());
        var line = Assert.Single(run.ErrorLinesStartingWithError);
        Assert.Contains($"below the model's opset {HiveNetExporter.Opset}", line, StringComparison.Ordinal);
        Assert.False(Directory.Exists(outFolder), "A refused raise must write nothing.");
    }

    [Fact]
    public async Task LayerNoSampleReachesIsWarnedAboutMarkedAndKeptAtTheHighestWidth()
    {
        var folder = Path.Combine(fixture.Folder, "uncovered");
        Directory.CreateDirectory(folder);
        File.WriteAllBytes(Path.Combine(folder, "model.onnx"), UncoveredModel.Bytes());
        File.WriteAllBytes(Path.Combine(folder, "data.npz"), UncoveredModel.Dataset());

        var run = await CommandRun.RunAsync(
            "plan", "--model", Path.Combine(folder, "model.onnx"), "--data", Path.Combine(folder, "data.npz"), "--budget", "sqnr>=20", "--bits", "2,4,8", "--out", Path.Combine(folder, "out"));

        Assert.True(run.ExitCode == 0, run.ToString());
        Assert.Contains($"warning: Layer '{UncoveredModel.UntakenLayer}' is not exercised", run.Out, StringComparison.Ordinal);
        Assert.Matches(@"branch/else_branch/fc_else\s+MatMul\s+12\s+8!", run.Out);
        using var manifest = JsonDocument.Parse(File.ReadAllBytes(Path.Combine(folder, "out", "manifest.json")));
        var layer = manifest.RootElement.GetProperty("layers").EnumerateArray().Single(l => l.GetProperty("name").GetString() == UncoveredModel.UntakenLayer);
        Assert.Equal("not-exercised", layer.GetProperty("coverage").GetProperty("status").GetString());
        Assert.Equal(8, layer.GetProperty("bits").GetInt32());
    }

    [Fact]
    public async Task AtOpset21TheCountedBytesAreTheFileAndThreeBitLayersAreStoredAsInt4()
    {
        // The demo model is opset 21 (HiveNetExporter). fc1 is pinned to 3 bits so a 3-bit layer is always there.
        var outFolder = Path.Combine(fixture.Folder, "opset21");
        var run = await CommandRun.RunAsync(
            "plan", "--model", fixture.ModelPath, "--data", fixture.CalibrationPath, "--budget", "sqnr>=20", "--bits", "2,3,4,6,8", "--pin", "fc1=3", "--out", outFolder);
        Assert.True(run.ExitCode == 0, run.ToString());

        using var manifest = JsonDocument.Parse(File.ReadAllBytes(Path.Combine(outFolder, "manifest.json")));
        var totals = manifest.RootElement.GetProperty("totals");
        var written = new FileInfo(Path.Combine(outFolder, "model.quantized.onnx")).Length;
        var counted = totals.GetProperty("bytes").GetInt64();
        Assert.Equal("container", totals.GetProperty("storage").GetString());
        Assert.Equal(written, totals.GetProperty("modelFileBytes").GetInt64());
        Assert.True(Math.Abs(counted - written) <= written / 100, $"counted {counted} B, wrote {written} B");
        var fp32 = totals.GetProperty("float32Bytes").GetInt64();
        Assert.Equal(fp32 / (double)written, totals.GetProperty("compression").GetDouble(), 9);
        Assert.Contains($"written: model.quantized.onnx {written:N0} bytes", run.Out, StringComparison.Ordinal);

        // Every layer at 2-4 bits is int4 (ONNX IR: two values per byte), 5-8 bits int8.
        var proto = P.ModelProto.Parser.ParseFrom(File.ReadAllBytes(Path.Combine(outFolder, "model.quantized.onnx")));
        foreach (var layer in manifest.RootElement.GetProperty("layers").EnumerateArray())
        {
            var bits = layer.GetProperty("bits").GetInt32();
            var stored = proto.Graph.Initializer.Single(t => t.Name == layer.GetProperty("weight").GetString() + "#levels");
            Assert.Equal((int)(bits <= 4 ? P.TensorProto.Types.DataType.Int4 : P.TensorProto.Types.DataType.Int8), stored.DataType);
            var parameters = layer.GetProperty("parameters").GetInt64();
            Assert.Equal(bits <= 4 ? (parameters + 1) / 2 : parameters, stored.RawData.Length);
        }

        Assert.Equal(3, manifest.RootElement.GetProperty("layers").EnumerateArray().Single(l => l.GetProperty("name").GetString() == "fc1").GetProperty("bits").GetInt32());

        // 2 and 3 bits save nothing over int4, 6 nothing over int8: the summary says so.
        var note = manifest.RootElement.GetProperty("outcome").GetProperty("storageNote").GetString();
        Assert.NotNull(note);
        Assert.StartsWith("Widths 2, 3, 6 save nothing at opset 21", note, StringComparison.Ordinal);

        // Those widths were measured, so the note speaks of the measured plan under packed storage, not of unmeasured ones.
        Assert.Contains("With --storage packed", note, StringComparison.Ordinal);
        Assert.DoesNotContain("did not measure", note, StringComparison.Ordinal);
        Assert.Contains(note, run.Out, StringComparison.Ordinal);
    }

    [Theory]
    [InlineData("--bits 1,4", "Bit width 1 is not supported")]
    [InlineData("--budget top1>=99", "The budget limit 99 is out of range for top1")]
    [InlineData("--pin fc9=4", "Pinned layer 'fc9' is not a layer of the model")]
    [InlineData("--exclude nope", "Excluded layer 'nope' is not a layer of the model")]
    [InlineData("--outputs nope", "Output 'nope' is not an output of the model")]
    public async Task ArgumentsTheModelDoesNotTakeExit2AndWriteNothing(string arguments, string said)
    {
        var outFolder = Path.Combine(fixture.Folder, "refused-" + Guid.NewGuid().ToString("N"));
        var given = arguments.Split(' ');
        string[] budget = given[0] == "--budget" ? [] : ["--budget", "sqnr>=25"];
        var run = await CommandRun.RunAsync(["plan", "--model", fixture.ModelPath, "--data", fixture.CalibrationPath, .. budget, .. given, "--out", outFolder]);

        Assert.True(run.ExitCode == 2, run.ToString());
        var line = Assert.Single(run.ErrorLinesStartingWithError);
        Assert.Contains(said, line, StringComparison.Ordinal);
        Assert.False(Directory.Exists(outFolder), "A refused plan must write nothing.");
    }

    [Fact]
    public async Task AMissingDatasetIsOneSentenceNamingTheFileAndExit1()
    {
        var missing = Path.Combine(fixture.Folder, "no-such.npz");
        var run = await CommandRun.RunAsync("plan", "--model", fixture.ModelPath, "--data", missing, "--budget", "sqnr>=25", "--out", Path.Combine(fixture.Folder, "x"));

        Assert.True(run.ExitCode == 1, run.ToString());
        Assert.Equal([$"error: Cannot read the dataset (--data) '{missing}': no such file."], run.ErrorLinesStartingWithError);
    }

    [Fact]
    public async Task AModelFileThatIsNotOnnxIsNamedByItsPathWithoutSpeakingOfUploads()
    {
        var run = await CommandRun.RunAsync("plan", "--model", fixture.CalibrationPath, "--data", fixture.CalibrationPath, "--budget", "sqnr>=25", "--out", Path.Combine(fixture.Folder, "x"));

        Assert.True(run.ExitCode == 1, run.ToString());
        var line = Assert.Single(run.ErrorLinesStartingWithError);
        Assert.Contains($"'{fixture.CalibrationPath}' is not a readable ONNX model", line, StringComparison.Ordinal);
        Assert.DoesNotContain("upload", line, StringComparison.OrdinalIgnoreCase);
    }

    [Fact]
    public async Task AnOutFolderThatCannotBeWrittenIsRefusedBeforeTheSearchInOneSentence()
    {
        // A file where a folder on the --out path should be: refused before any trial runs (nothing on standard output).
        var blocker = Path.Combine(fixture.Folder, "a-file");
        File.WriteAllText(blocker, "not a folder");
        var run = await CommandRun.RunAsync("plan", "--model", fixture.ModelPath, "--data", fixture.CalibrationPath, "--budget", "sqnr>=25", "--out", Path.Combine(blocker, "plan"));

        Assert.True(run.ExitCode == 1, run.ToString());
        Assert.Equal([$"error: Cannot write to '{Path.Combine(blocker, "plan")}' (--out): '{blocker}' on its path is a file, not a folder."], run.ErrorLinesStartingWithError);
        Assert.Empty(run.Out);
    }

    [Fact]
    public async Task ATop1BudgetFinerThanTheCalibrationSetIsWarnedAboutWithTheSamplesNeeded()
    {
        // The demo's calibration set has 64 samples: one changed answer is 1.56% of top-1 agreement, more than the 1%
        // that top1>=0.99 allows; 100 samples would allow one.
        Assert.Equal(64, HiveMonitorScenario.CalibrationCount);
        var outFolder = Path.Combine(fixture.Folder, "top1");
        var run = await CommandRun.RunAsync("plan", "--model", fixture.ModelPath, "--data", fixture.CalibrationPath, "--budget", "top1>=0.99", "--bits", "2,4,8", "--quiet", "--out", outFolder);

        Assert.True(run.ExitCode == 0, run.ToString());
        var warning = Assert.Single(run.Out.Split('\n'), l => l.StartsWith("warning: The budget top1>=0.99 is finer than the calibration set can resolve", StringComparison.Ordinal));
        Assert.Contains("one of its 64 samples changes top-1 agreement by 1.56%, more than the 1% the budget allows", warning, StringComparison.Ordinal);
        Assert.Contains("About 100 samples would let one answer in 100 change", warning, StringComparison.Ordinal);
        using var manifest = JsonDocument.Parse(File.ReadAllBytes(Path.Combine(outFolder, "manifest.json")));
        Assert.Contains(manifest.RootElement.GetProperty("warnings").EnumerateArray(), w => warning.EndsWith(w.GetString()!, StringComparison.Ordinal));

        // Quiet: no progress at all, so standard error is empty.
        Assert.Empty(run.Error);
    }

    [Fact]
    public async Task TheSummaryTableHasUnitsOneNumberFormatAndALegendForItsMarks()
    {
        var outFolder = Path.Combine(fixture.Folder, "excluded");
        var run = await CommandRun.RunAsync("plan", "--model", fixture.ModelPath, "--data", fixture.CalibrationPath, "--budget", "sqnr>=25", "--bits", "2,4,8", "--exclude", "fc2", "--out", outFolder);

        Assert.True(run.ExitCode == 0, run.ToString());
        Assert.Matches(@"(?m)^layer\s+op\s+parameters\s+bits\s+size \(bytes\)$", run.Out);

        // Every count of four digits or more carries thousands separators: conv2 has 1,152 parameters, fc1 32,768.
        Assert.Matches(@"(?m)^conv2\s+Conv\s+1,152\s+\d\s+[\d,]+$", run.Out);
        Assert.Matches(@"(?m)^fc1\s+Gemm\s+32,768\s", run.Out);
        Assert.DoesNotMatch(@"\b\d{4,}\b", string.Join('\n', run.Out.Split('\n').Where(l => !l.Contains("artifacts in", StringComparison.Ordinal) && !l.StartsWith("sqnr", StringComparison.Ordinal))));
        Assert.Matches(@"(?m)^fc2\s+Gemm\s+128\s+fp32\*", run.Out);
        Assert.Contains("bits: fp32* excluded (--exclude), kept FP32", run.Out, StringComparison.Ordinal);
        Assert.Matches(@"(?m)^sqnr: predicted \d+\.\d dB SQNR, measured \d+\.\d dB SQNR", run.Out);
    }

    [Fact]
    public async Task PairsAreMeasuredCountedAndSummarised()
    {
        var outFolder = Path.Combine(fixture.Folder, "pairs");
        var run = await CommandRun.RunAsync("plan", "--model", fixture.ModelPath, "--data", fixture.CalibrationPath, "--budget", "sqnr>=25", "--bits", "2,4,8", "--storage", "packed", "--pairs", "4", "--no-cache", "--out", outFolder);

        Assert.True(run.ExitCode == 0, run.ToString());
        using var manifest = JsonDocument.Parse(File.ReadAllBytes(Path.Combine(outFolder, "manifest.json")));
        using var trials = JsonDocument.Parse(File.ReadAllBytes(Path.Combine(outFolder, "trials.json")));
        var outcome = manifest.RootElement.GetProperty("outcome");
        var pairs = outcome.GetProperty("pairs").GetArrayLength();
        var rounds = outcome.GetProperty("rounds");
        Assert.InRange(pairs, 1, 8);
        Assert.Equal(pairs, trials.RootElement.EnumerateArray().Count(t => t.GetProperty("kind").GetString() == "pair"));
        Assert.Equal(4, manifest.RootElement.GetProperty("settings").GetProperty("pairs").GetInt32());
        Assert.Equal(outcome.GetProperty("validationRounds").GetInt32(), rounds.GetArrayLength());
        Assert.Matches($@"(?m)^validation: {rounds.GetArrayLength()} assignments measured, {pairs} pair trials; the first chosen was predicted at \d+\.\d dB SQNR \(\d+\.\d dB SQNR with pair terms\), measured \d+\.\d dB SQNR$", run.Out);
    }

    [Fact]
    public void WithoutATerminalProgressIsPlainStageLinesWithoutCarriageReturns()
    {
        // The fixture's run wrote to a StringWriter, not a terminal (the test host's standard error is redirected).
        Assert.True(Console.IsErrorRedirected);
        Assert.DoesNotContain('\r', fixture.Plan.Error);
        Assert.Equal("reference: started (1 steps)", fixture.Plan.ErrorLines[0]);
        Assert.Contains("sweep: done (12/12)", fixture.Plan.ErrorLines);
        Assert.Equal("export: done (1/1)", fixture.Plan.ErrorLines[^1]);
    }

    private JsonDocument ReadJson(string name) => JsonDocument.Parse(File.ReadAllBytes(Path.Combine(fixture.PlanFolder, name)));
}

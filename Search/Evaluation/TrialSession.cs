using System.Diagnostics;
using System.Numerics.Tensors;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Quantization;
using Google.Protobuf;
using Microsoft.ML.OnnxRuntime;
using Microsoft.ML.OnnxRuntime.Tensors;

namespace Bitbudget.Search.Evaluation;

/// <summary>
/// Measures what quantizing weights does to a model's outputs on a calibration set. One ONNX Runtime
/// session is built per model with every layer weight as a graph input, so a trial only swaps the
/// perturbed weights and runs forward; no session is rebuilt per trial. For a single perturbed layer
/// the session can also run only the graph downstream of that layer, fed from activations cached by
/// the reference run (see <see cref="GraphSlicer"/>), when that is estimated to be cheaper.
/// With <see cref="TrialSessionOptions.Activations"/> set, the input activation of every layer is
/// calibrated on the calibration set and put behind a per-layer switch (see <see cref="ActivationQdq"/>),
/// so a trial quantizes the activations of exactly the layers whose weights it quantizes.
/// </summary>
public sealed class TrialSession : IDisposable
{
    private readonly OnnxModel _model;
    private readonly CalibrationSet _data;
    private readonly TrialSessionOptions _options;
    private readonly BatchPlan _plan;
    private readonly IReadOnlyDictionary<string, long[]> _probeShapes;
    private readonly int _probeRows;
    private readonly NodeCosts? _nodeCosts;
    private readonly long _cacheBudgetBytes;
    private readonly string _batchReason;
    private readonly DeadOutputs _deadOutputs;
    private readonly InferenceSession _full;
    private readonly RunOptions _runOptions = new();
    private readonly SessionOptions _sessionOptions;
    private readonly Dictionary<string, float[]> _fp32ByLayer;
    private readonly Dictionary<string, WeightLayer> _weightLayers;
    private readonly Dictionary<string, OrtValue> _fp32Values;
    private readonly IReadOnlyDictionary<string, BiasSite> _biasSites;
    private readonly List<Dictionary<string, OrtValue>> _dataFeeds;
    private readonly GraphSlicer _slicer;
    private List<Dictionary<string, OrtValue>>? _cachedActivations;
    private CutPlan? _cutPlan;
    private readonly Dictionary<string, (int ElementType, int Rank)> _activationTypes = new(StringComparer.Ordinal);
    private readonly HashSet<string> _switchedLayers = new(StringComparer.Ordinal);
    private readonly HashSet<string> _switchNames = new(StringComparer.Ordinal);
    private readonly OrtValue? _switchOff;
    private readonly OrtValue? _switchOn;
    private readonly IReadOnlyDictionary<string, int?> _outputAxes;
    private (int Cut, InferenceSession Session)? _suffix;
    private readonly long _runAndCacheBytes;
    private readonly long _activationBytesPerSample;
    private IReadOnlyDictionary<string, int>? _pendingTrials;
    private StackedSession? _stacked;
    private double _lowestFp32Sqnr = double.PositiveInfinity;
    private string? _stackingOff;
    private string? _stackingSkipped;
    private string? _oneCopyReason;
    private int _stackedRuns;
    private int _stackedTrials;
    private int _largestStack;
    private string _layoutNote;
    private double _suffixBuildMilliseconds;
    private int _suffixBuilds;

    /// <summary>Most copies of a chunk one stacked run holds, whatever the memory allows (more adds little but rows).</summary>
    private const int MaxStackedCopies = 16;

    /// <summary>
    /// Least SQNR an FP32 copy of a stacked run may have against the reference, per output. Rounding differences of FP32
    /// kernels sit near 130 dB and more (measured on the OCR models); 100 dB keeps the SQNR of a trial at 70 dB within
    /// 0.005 dB of the trial run unstacked (noise powers add: 10 log10(1 + 10^-3)).
    /// </summary>
    internal const double StackedFp32FloorDb = 100;

    /// <summary>Trials per layer assumed when a suffix run comes before <see cref="PrepareSweep"/> (the usual number of candidate widths).</summary>
    private const int AssumedTrialsPerLayer = 6;

    private TrialSession(OnnxModel model, CalibrationSet data, TrialSessionOptions options)
    {
        _model = model;
        _data = data;
        _options = options;
        _sessionOptions = new SessionOptions { GraphOptimizationLevel = GraphOptimizationLevel.ORT_ENABLE_ALL };
        if (options.IntraOpThreads is { } threads)
        {
            _sessionOptions.IntraOpNumThreads = threads;
        }

        var weightsAsInputs = global::Onnx.ModelProto.Parser.ParseFrom(model.BuildWeightsAsInputs());
        _fp32ByLayer = model.Layers.ToDictionary(l => l.Name, model.GetWeight, StringComparer.Ordinal);
        _weightLayers = model.Layers.GroupBy(l => l.WeightName, StringComparer.Ordinal).ToDictionary(g => g.Key, g => g.First(), StringComparer.Ordinal);
        _fp32Values = model.Layers.ToDictionary(
            l => l.WeightName,
            l => OrtTensors.Wrap(_fp32ByLayer[l.Name], l.Shape.ToArray()),
            StringComparer.Ordinal);

        // Corrected biases are fed like weights: each corrected layer reads its bias from a graph input, fed its own
        // bias (or zeros) in FP32 runs, so the reference is the uploaded model's.
        _biasSites = options.Rounder?.BiasSites ?? new Dictionary<string, BiasSite>(StringComparer.Ordinal);
        foreach (var site in _biasSites.Values)
        {
            site.AddSessionInput(weightsAsInputs.Graph);
            _fp32Values[site.InputName] = OrtTensors.Wrap(site.Original, site.Dims);
        }

        // One sample through the model with every tensor tapped: shapes for the cost model and the memory the runs need.
        (_probeShapes, _probeRows) = ProbeShapes(weightsAsInputs);
        var memory = SweepMemory.Plan(data, options, _probeShapes, _probeRows, weightsAsInputs, model.Layers.Sum(l => l.ParameterCount));
        _plan = BatchPlan.For(data, memory.SamplesPerRun);
        _cacheBudgetBytes = memory.CacheBudgetBytes;
        _batchReason = memory.Reason;
        _deadOutputs = new DeadOutputs(memory.DeadOutputBytes);
        _runAndCacheBytes = memory.RunAndCacheBytes;
        _activationBytesPerSample = memory.ActivationBytesPerSample;
        _dataFeeds = BuildDataFeeds();

        var runModel = weightsAsInputs;
        Activations = [];
        if (options.Activations is { } calibration)
        {
            if (model.Opset < ActivationQuantization.MinimumOpset)
            {
                throw new EngineException("settings-invalid", ActivationQuantization.OpsetMessage(model.Opset));
            }

            Activations = options.FixedActivations ?? Calibrate(weightsAsInputs, calibration);
            _switchedLayers.UnionWith(Activations.Select(a => a.Layer));
            _switchNames.UnionWith(_switchedLayers.Select(ActivationQdq.SwitchName));
            _switchOff = OrtValue.CreateTensorValueFromMemory(new[] { false }, []);
            _switchOn = OrtValue.CreateTensorValueFromMemory(new[] { true }, []);
            runModel = ActivationQdq.WithSwitches(weightsAsInputs, Activations);
        }

        _slicer = new GraphSlicer(runModel);
        var build = Stopwatch.StartNew();
        _full = new InferenceSession(runModel.ToByteArray(), _sessionOptions);
        SessionBuildMilliseconds = build.Elapsed.TotalMilliseconds;

        _nodeCosts = _probeShapes.Count > 0 ? NodeCosts.Of(runModel.Graph, _probeShapes) : null;
        _outputAxes = OutputSampleAxes.Find(model.Outputs, _full.OutputNames, _plan, Probe);
        var pass = Stopwatch.StartNew();
        ReferenceOutputs = Run(_full, _full.OutputNames, feedsOverride: null, extraFeeds: null);
        ForwardPassMilliseconds = pass.Elapsed.TotalMilliseconds;
        // Accuracy compares labels with the argmax over the first output's last axis: a label past it never matches.
        data.CheckLabels(ReferenceOutputs[0].Shape is [.., var classes] ? classes : 1, ReferenceOutputs[0].Name);
        ReferenceMetrics = Compare(ReferenceOutputs);
        _layoutNote = $"{_batchReason}; no sensitivity trial was run, so no cut point was chosen";
    }

    /// <summary>Outputs of the FP32 model over the whole calibration set.</summary>
    public IReadOnlyList<OutputTensor> ReferenceOutputs { get; }

    /// <summary>Each output's sample axis (null: the output has none and is stacked per run), found by <see cref="OutputSampleAxes"/>.</summary>
    public IReadOnlyDictionary<string, int?> OutputAxes => _outputAxes;

    /// <summary>The reference compared with itself: carries the FP32 accuracy against labels.</summary>
    public MetricSet ReferenceMetrics { get; }

    /// <summary>Time ONNX Runtime took to build the weights-as-inputs session, in ms.</summary>
    public double SessionBuildMilliseconds { get; }

    /// <summary>Samples in one run (a chunk of the calibration set), chosen to fit <see cref="TrialSessionOptions.MaxSweepMemoryBytes"/>.</summary>
    public int SamplesPerRun => _plan.BatchSize;

    /// <summary>Time of one pass of the FP32 model over the calibration set, in ms.</summary>
    public double ForwardPassMilliseconds { get; }

    /// <summary>Bytes of activations cached at the cut points (0 when none are), as the cut plan priced them.</summary>
    internal long CachedActivationBytes => _cachedActivations is null ? 0 : _cutPlan?.CacheBytes ?? 0;

    /// <summary>True when cut-set activations are cached (planning the cuts first if needed), so single-layer trials may run a suffix.</summary>
    public bool SuffixAvailable => EnsureCutPlan(null) is { Cuts.Count: > 0 } && _cachedActivations is not null;

    /// <summary>
    /// How the sweep was laid out, for the user: samples per run and why, and the cut points with their cache (once a
    /// sweep has been prepared).
    /// </summary>
    public string SweepNote => _layoutNote + StackingNote()
        + (_suffixBuilds > 0 ? string.Create(System.Globalization.CultureInfo.InvariantCulture, $"; {_suffixBuilds} suffix sessions built in {_suffixBuildMilliseconds / 1000:0.0} s") : string.Empty);

    /// <summary>
    /// Chooses the sweep's shared cut points for the trials still to run (by layer name) and caches their activations;
    /// nothing is cached when no trial is left. Trials that run before this assume every layer has a few trials.
    /// </summary>
    public void PrepareSweep(IReadOnlyDictionary<string, int> pendingTrialsByLayer)
    {
        ArgumentNullException.ThrowIfNull(pendingTrialsByLayer);
        if (pendingTrialsByLayer.Values.Sum() > 0)
        {
            _pendingTrials = pendingTrialsByLayer;
            EnsureCutPlan(pendingTrialsByLayer);
        }
    }

    /// <summary>
    /// The calibrated 8-bit quantization of each layer's input activation (one entry per consumer node of
    /// the main graph); empty when activation quantization is off.
    /// </summary>
    public IReadOnlyList<ActivationQuantization> Activations { get; }

    /// <summary>Opens a session for <paramref name="model"/> and runs the FP32 reference on <paramref name="data"/>.</summary>
    public static TrialSession Open(OnnxModel model, CalibrationSet data, TrialSessionOptions? options = null)
    {
        try
        {
            return new TrialSession(model, data, options ?? new TrialSessionOptions());
        }
        catch (OnnxRuntimeException e)
        {
            throw new EngineException("model-cannot-run", $"ONNX Runtime cannot run the model on this dataset: {e.Message}", e);
        }
    }

    /// <summary>The weight of <paramref name="layer"/> as <paramref name="setting"/> stores it, back in FP32.</summary>
    public float[] Quantized(WeightLayer layer, LayerSetting setting)
    {
        if (setting.Rounding != RoundingMethod.Nearest)
        {
            return (_options.Rounder ?? throw new InvalidOperationException("Compensated rounding needs the session's weight rounder.")).Dequantized(layer, setting);
        }

        var fp32 = _fp32ByLayer[layer.Name];
        var result = new float[fp32.Length];
        WeightQuantizer.FakeQuantize(fp32, layer.Shape, layer.ChannelAxis, setting, result);
        return result;
    }

    /// <summary>
    /// Measures a whole assignment end to end; layers not named stay FP32. With activation quantization on,
    /// every layer at an integer bit width also gets its input activation quantized.
    /// </summary>
    public MetricSet MeasureAssignment(IReadOnlyDictionary<string, LayerSetting> assignment)
    {
        var weights = new Dictionary<string, float[]>(StringComparer.Ordinal);
        var biases = new Dictionary<string, float[]>(StringComparer.Ordinal);
        var activations = new List<string>();
        foreach (var (name, setting) in assignment)
        {
            if (setting.Bits != BitWidths.Float32)
            {
                weights[name] = Quantized(Layer(name), setting);
            }

            if (CorrectedBias(Layer(name), setting) is { } bias)
            {
                biases[name] = bias;
            }

            if (QuantizesActivation(setting) && HasActivation(name))
            {
                activations.Add(name);
            }
        }

        var outputs = RunFull(weights, activations, biases);
        var metrics = Compare(outputs);
        _deadOutputs.Add(outputs, ReferenceOutputs);
        return metrics;
    }

    /// <summary>The bias <paramref name="layer"/> runs with under <paramref name="setting"/> when it differs from its own (bias correction).</summary>
    private float[]? CorrectedBias(WeightLayer layer, LayerSetting setting) =>
        _biasSites.ContainsKey(layer.Name) ? _options.Rounder!.CorrectedBias(layer, setting) : null;

    /// <summary>
    /// Measures one layer at one setting with every other layer FP32 (a sensitivity trial). Runs only the
    /// downstream part of the graph when <paramref name="allowSuffix"/> and that is estimated cheaper
    /// for <paramref name="trialsForLayer"/> trials of this layer.
    /// </summary>
    public MetricSet MeasureLayer(WeightLayer layer, LayerSetting setting, int trialsForLayer = 1, bool allowSuffix = true)
    {
        var weight = Quantized(layer, setting);
        var bias = CorrectedBias(layer, setting);
        var activation = QuantizesActivation(setting) && HasActivation(layer.Name);
        var cut = allowSuffix ? PlannedCut(layer, trialsForLayer) : 0;
        var outputs = cut > 0
            ? RunSuffixFrom(cut, layer, weight, activation, bias)
            : RunFull(new Dictionary<string, float[]>(StringComparer.Ordinal) { [layer.Name] = weight }, activation ? [layer.Name] : null, Single(layer, bias));
        var metrics = Compare(outputs) with
        {
            SamplesChanged = SampleChanges.Count(ReferenceOutputs, outputs, _data.SampleCount),
        };
        _deadOutputs.Add(outputs, ReferenceOutputs);
        return metrics;
    }

    /// <summary>
    /// Measures one layer at several settings with every other layer FP32 (sensitivity trials): the same metrics as
    /// <see cref="MeasureLayer"/> per setting, in as few runs as the model allows. Where the batch is free, the widths go
    /// on the batch axis, one stacked copy of the chunk per width, with one more copy at FP32 in the layer's first run whose
    /// outputs must equal the reference bit for bit; a model where they do not (an op mixes samples, or folds the batch
    /// into another axis) turns stacking off for the session and measures one width per run, as <see cref="SweepNote"/> says.
    /// </summary>
    public IReadOnlyList<MetricSet> MeasureLayerWidths(WeightLayer layer, IReadOnlyList<LayerSetting> settings, int trialsForLayer)
    {
        ArgumentNullException.ThrowIfNull(layer);
        ArgumentNullException.ThrowIfNull(settings);
        // The activation switch is one per layer, shared by every copy, so only weight-only trials share a run; a corrected
        // bias is one graph input too, so bias-corrected trials run one width at a time.
        var stackable = Enumerable.Range(0, settings.Count)
            .Where(i => !(QuantizesActivation(settings[i]) && HasActivation(layer.Name)) && !(settings[i].BiasCorrection && _biasSites.ContainsKey(layer.Name)))
            .ToList();
        var results = new MetricSet?[settings.Count];
        if (stackable.Count > 1 && MeasureStacked(layer, stackable.Select(i => settings[i]).ToList(), trialsForLayer) is { } stacked)
        {
            for (var n = 0; n < stackable.Count; n++)
            {
                results[stackable[n]] = stacked[n];
            }
        }

        return results.Select((r, i) => r ?? MeasureLayer(layer, settings[i], trialsForLayer)).ToList();
    }

    /// <summary>The layer's widths on stacked runs, or null when this session does not stack (the reason is kept for the note).</summary>
    private MetricSet[]? MeasureStacked(WeightLayer layer, IReadOnlyList<LayerSetting> settings, int trialsForLayer)
    {
        if (!_options.ConstantSuffixes || _stackingOff is not null || CutPosition(layer) < 0)
        {
            return null;
        }

        var stacked = StackedSessionFor(_options.SuffixRuns ? PlannedCut(layer, trialsForLayer) : 0, settings.Count);
        if (stacked is null)
        {
            return null;
        }

        var weights = settings.Select(s => Quantized(layer, s)).ToList();
        var results = new MetricSet[settings.Count];
        var copies = stacked.Copies;
        if (copies == 1)
        {
            return MeasureOneCopy(stacked, layer, weights);
        }

        // The first run keeps the last copy at FP32: the check that the copies stay apart, and the baseline a trial's changed
        // samples are counted against (the stacked graph's own FP32 outputs, so an unreached layer changes no sample).
        // Runs are balanced, so the last one is not nearly empty.
        var runs = (settings.Count + copies) / copies;
        List<OutputTensor>? baseline = null;
        try
        {
            var next = 0;
            for (var run = 0; run < runs; run++)
            {
                var take = Math.Min((settings.Count + 1 - next + (runs - run) - 1) / (runs - run), copies - (run == 0 ? 1 : 0));
                take = Math.Min(take, settings.Count - next);
                var slots = new float[]?[copies];
                for (var j = 0; j < take; j++)
                {
                    slots[j] = weights[next + j];
                }

                var outputs = RunStacked(stacked, layer, slots);
                baseline ??= outputs[^1];
                for (var j = 0; j < take; j++)
                {
                    results[next + j] = Compare(outputs[j]) with { SamplesChanged = SampleChanges.Count(baseline, outputs[j], _data.SampleCount) };
                    _deadOutputs.Add(outputs[j], ReferenceOutputs);
                }

                next += take;
                _stackedRuns++;
            }
        }
        catch (StackingMismatchException e)
        {
            TurnStackingOff(e.Message);
            return null;
        }
        catch (OnnxRuntimeException e)
        {
            TurnStackingOff($"ONNX Runtime could not run the stacked copies ({e.Message})");
            return null;
        }

        _stackedTrials += settings.Count;
        return results;
    }

    /// <summary>One width per run on the constant-weight suffix; its FP32 outputs, run once per session, are the check and the baseline.</summary>
    private MetricSet[]? MeasureOneCopy(StackedSession stacked, WeightLayer layer, IReadOnlyList<float[]> weights)
    {
        try
        {
            stacked.Baseline ??= RunStacked(stacked, layer, [null])[0];
            var results = weights.Select(w =>
            {
                var outputs = RunStacked(stacked, layer, [w])[0];
                var metrics = Compare(outputs) with { SamplesChanged = SampleChanges.Count(stacked.Baseline, outputs, _data.SampleCount) };
                _deadOutputs.Add(outputs, ReferenceOutputs);
                return metrics;
            }).ToArray();
            _stackedRuns += weights.Count;
            _stackedTrials += weights.Count;
            return results;
        }
        catch (StackingMismatchException e)
        {
            TurnStackingOff(e.Message);
            return null;
        }
    }

    /// <summary>
    /// One run per chunk of the stacked session with copy j of the layer's weight set to <paramref name="slots"/>[j] (null:
    /// FP32); returns each copy's outputs over the calibration set. A copy at FP32 must give the reference bit for bit.
    /// </summary>
    private List<List<OutputTensor>> RunStacked(StackedSession stacked, WeightLayer layer, float[]?[] slots)
    {
        var owned = new List<OrtValue>();
        try
        {
            var overrides = new Dictionary<string, OrtValue>(stacked.Fp32Feeds, StringComparer.Ordinal);
            for (var j = 0; j < slots.Length; j++)
            {
                var value = _fp32Values[layer.WeightName];
                if (slots[j] is { } weight)
                {
                    value = OrtTensors.Wrap(weight, layer.Shape.ToArray());
                    owned.Add(value);
                }

                overrides[GraphSlicer.WidthInput(layer.WeightName, j)] = value;
            }

            var session = stacked.Session;
            if (slots.Length == 1)
            {
                var single = WithReferenceOutputs(Run(session, session.OutputNames, overrides, _cachedActivations));
                if (slots[0] is null)
                {
                    CheckFp32Copy(layer, single);
                }

                return [single];
            }

            var names = session.OutputNames.ToList();
            var parts = slots.Select(_ => names.Select(_ => new List<Array>(_plan.BatchCount)).ToList()).ToList();
            var shapes = slots.Select(_ => names.Select(_ => new List<long[]>(_plan.BatchCount)).ToList()).ToList();
            var counts = new List<int>(_plan.BatchCount);
            for (var b = 0; b < _plan.BatchCount; b++)
            {
                var (_, count) = _plan.Batch(b);
                counts.Add(count);
                var inputs = Feeds(session, b, overrides, _cachedActivations);
                using var results = session.Run(_runOptions, inputs.Keys.ToList(), inputs.Values.ToList(), names);
                for (var o = 0; o < names.Count; o++)
                {
                    var data = OrtTensors.CopyRows(results[o], int.MaxValue, out var shape);
                    var axis = _outputAxes[names[o]] ?? throw new StackingMismatchException($"output '{names[o]}' has no sample axis");
                    if (shape.Length <= axis || shape[axis] != (long)count * slots.Length)
                    {
                        throw new StackingMismatchException($"output '{names[o]}' came out with shape [{string.Join(", ", shape)}] for {slots.Length} copies of {count} samples");
                    }

                    for (var j = 0; j < slots.Length; j++)
                    {
                        parts[j][o].Add(SampleSlicer.Slice(data, shape, axis, j * count, count, count, out var sliceShape));
                        shapes[j][o].Add(sliceShape);
                    }
                }
            }

            var copies = new List<List<OutputTensor>>(slots.Length);
            for (var j = 0; j < slots.Length; j++)
            {
                var outputs = WithReferenceOutputs(Assemble(names, parts[j], shapes[j], counts));
                if (slots[j] is null)
                {
                    CheckFp32Copy(layer, outputs);
                }

                copies.Add(outputs);
            }

            return copies;
        }
        finally
        {
            owned.ForEach(v => v.Dispose());
        }
    }

    /// <summary>
    /// An FP32 copy must give the reference to within <see cref="StackedFp32FloorDb"/> on every output: the stacked graph has
    /// the weights it never perturbs as constants, which ONNX Runtime folds and pre-packs (a plain pass's speed, not its
    /// last bits), while a copy that took another copy's rows, or lost its own, is off by far more.
    /// </summary>
    private void CheckFp32Copy(WeightLayer layer, IReadOnlyList<OutputTensor> outputs)
    {
        for (var o = 0; o < ReferenceOutputs.Count; o++)
        {
            var sqnr = OutputComparer.Compare([ReferenceOutputs[o]], [outputs[o]], null, _options.MetricSpace).SqnrDb;
            _lowestFp32Sqnr = Math.Min(_lowestFp32Sqnr, sqnr);
            if (!(sqnr >= StackedFp32FloorDb))
            {
                throw new StackingMismatchException(string.Create(
                    System.Globalization.CultureInfo.InvariantCulture,
                    $"the FP32 copy of layer '{layer.Name}' gives output '{ReferenceOutputs[o].Name}' at {sqnr:0.#} dB SQNR against the reference, under the {StackedFp32FloorDb} dB allowed"));
            }
        }
    }

    /// <summary>
    /// The stacked session for <paramref name="cut"/>: built when the sweep moves to it, with as many copies as the memory
    /// allows up to the widths of its layers still to measure (plus the FP32 check). Null when stacking cannot hold here.
    /// </summary>
    private StackedSession? StackedSessionFor(int cut, int widths)
    {
        if (_stacked is { } current && current.Cut == cut)
        {
            return current;
        }

        _stacked?.Session.Dispose();
        _stacked = null;
        var blocked = StackingBlocked();

        var memoryCopies = _activationBytesPerSample > 0
            ? Math.Max(0, _runAndCacheBytes - CachedActivationBytes) / ((double)_activationBytesPerSample * SamplesPerRun)
            : _options.MaxBatch / (double)SamplesPerRun;
        var layers = _model.Layers.Where(l => CutPosition(l) >= 0 && CutServing(CutPosition(l)) == cut).ToList();
        var wanted = 1 + Math.Max(widths, layers.Max(l => _pendingTrials?.GetValueOrDefault(l.Name) ?? 0));
        var allowed = blocked is not null ? 1 : (int)Math.Max(1, Math.Min(Math.Min(MaxStackedCopies, _options.MaxWidthsPerRun), Math.Floor(memoryCopies)));
        if (allowed < 2)
        {
            _oneCopyReason ??= blocked ?? (_options.MaxWidthsPerRun < 2
                ? "MaxWidthsPerRun is 1"
                : string.Create(System.Globalization.CultureInfo.InvariantCulture, $"MaxSweepMemoryBytes leaves room for one copy of a {SamplesPerRun}-sample chunk"));
        }

        // As few runs as the memory allows, then as few copies as fill them (two runs of 4 for 6 widths and the check, not 6 + 1).
        var runs = (wanted + allowed - 1) / allowed;
        var copies = allowed < 2 ? 1 : (wanted + runs - 1) / runs;
        var weightNames = layers.Select(l => l.WeightName).ToHashSet(StringComparer.Ordinal);
        var batched = _slicer.CutSet(cut).Where(IsBatched).ToList();
        var model = _slicer.StackedSuffix(cut, weightNames, copies, batched, _activationTypes, Fp32Constant, out var reason);
        if (model is null)
        {
            // Another cut's layers may still stack; this one runs a width per run.
            _stackingSkipped ??= reason;
            return null;
        }

        var clock = Stopwatch.StartNew();
        var session = new InferenceSession(model.ToByteArray(), _sessionOptions);
        _suffixBuildMilliseconds += clock.Elapsed.TotalMilliseconds;
        _suffixBuilds++;
        var fp32 = new Dictionary<string, OrtValue>(StringComparer.Ordinal);
        foreach (var layer in layers)
        {
            for (var j = 1; j < copies; j++)
            {
                fp32[GraphSlicer.WidthInput(layer.WeightName, j)] = _fp32Values[layer.WeightName];
            }
        }

        _largestStack = Math.Max(_largestStack, copies);
        _stacked = new StackedSession(cut, session, copies, layers.Select(l => l.Name).ToHashSet(StringComparer.Ordinal), fp32);
        return _stacked;
    }

    /// <summary>The FP32 weight behind a weights-as-inputs graph input, as an initializer; null for any other input.</summary>
    private global::Onnx.TensorProto? Fp32Constant(string input)
    {
        if (_weightLayers.TryGetValue(input, out var layer) is false)
        {
            return null;
        }

        var tensor = new global::Onnx.TensorProto { Name = input, DataType = (int)global::Onnx.TensorProto.Types.DataType.Float };
        tensor.Dims.AddRange(layer.Shape);
        tensor.RawData = ByteString.CopyFrom(System.Runtime.InteropServices.MemoryMarshal.AsBytes(_fp32ByLayer[layer.Name].AsSpan()));
        return tensor;
    }

    /// <summary>Why no run of this session can stack the batch (null: it may).</summary>
    private string? StackingBlocked()
    {
        if (_plan.FixedBatch)
        {
            return "the model fixes its batch";
        }

        for (var i = 0; i < _model.Inputs.Count; i++)
        {
            if (_data.SampleAxes[i] is int axis && axis != 0)
            {
                return $"input '{_model.Inputs[i].Name}' has its samples on axis {axis}";
            }
        }

        return _outputAxes.FirstOrDefault(p => p.Value is null) is { Key: { } name } ? $"output '{name}' has no sample axis" : null;
    }

    /// <summary>A cut-set tensor that carries the chunk's samples on axis 0: a data input with its samples there, or a cached FP32 activation as long as the chunk.</summary>
    private bool IsBatched(string tensor)
    {
        var input = _model.Inputs.Select((v, i) => (v.Name, i)).FirstOrDefault(p => p.Name == tensor);
        if (input.Name is not null)
        {
            return _data.SampleAxes[input.i] == 0;
        }

        if (_cachedActivations is not { Count: > 0 } cached || !cached[0].TryGetValue(tensor, out var value))
        {
            return false;
        }

        var info = value.GetTensorTypeAndShape();
        return info.ElementDataType == TensorElementType.Float && info.Shape is [var rows, ..] && rows == _plan.Batch(0).Count;
    }

    private void TurnStackingOff(string reason)
    {
        _stackingOff ??= reason;
        _stacked?.Session.Dispose();
        _stacked = null;
    }

    private string StackingNote()
    {
        if (!_options.ConstantSuffixes)
        {
            return string.Empty;
        }

        var runs = string.Create(System.Globalization.CultureInfo.InvariantCulture, $"{_stackedTrials} trials in {_stackedRuns} runs");
        var floor = string.Create(System.Globalization.CultureInfo.InvariantCulture, $"FP32 checks at {_lowestFp32Sqnr:0.#} dB or more against the reference (floor {StackedFp32FloorDb} dB)");
        if (_stackingOff is not null)
        {
            return $"; one width per run on the weights-as-inputs graph, as {_stackingOff}"
                + (_stackedTrials > 0 ? $" (found after {runs} on constant-weight suffixes, which stand: their FP32 checks held)" : string.Empty);
        }

        if (_stackedTrials == 0)
        {
            return _stackingSkipped is null ? string.Empty : $"; one width per run (a cut could not stack: {_stackingSkipped})";
        }

        var skipped = _stackingSkipped is null ? string.Empty : $" (some cuts ran a width per run: {_stackingSkipped})";
        return _largestStack > 1
            ? string.Create(System.Globalization.CultureInfo.InvariantCulture, $"; widths stacked on the batch axis on suffixes with the unperturbed weights as constants, up to {_largestStack} copies of a chunk per run: {runs}, each layer's first run with an FP32 copy; {floor}{skipped}")
            : $"; one width per run on suffixes with the unperturbed weights as constants (widths not stacked: {_oneCopyReason}): {runs}; {floor}{skipped}";
    }

    /// <summary>
    /// Runs the whole model with some layers' weights replaced (by layer name) and, when activation
    /// quantization is on, the input activations of <paramref name="activationLayers"/> quantized, and the biases of
    /// <paramref name="biasesByLayer"/> (layers with a bias site, see <see cref="BiasSite"/>) replaced.
    /// </summary>
    public IReadOnlyList<OutputTensor> RunFull(
        IReadOnlyDictionary<string, float[]> weightsByLayer,
        IReadOnlyCollection<string>? activationLayers = null,
        IReadOnlyDictionary<string, float[]>? biasesByLayer = null)
    {
        var owned = new List<OrtValue>();
        try
        {
            var overrides = new Dictionary<string, OrtValue>(StringComparer.Ordinal);
            foreach (var (name, weight) in weightsByLayer)
            {
                var layer = Layer(name);
                var value = OrtTensors.Wrap(weight, layer.Shape.ToArray());
                owned.Add(value);
                overrides[layer.WeightName] = value;
            }

            AddBiases(overrides, owned, biasesByLayer);

            SwitchOn(overrides, activationLayers ?? []);
            return Run(_full, _full.OutputNames, overrides, extraFeeds: null);
        }
        finally
        {
            foreach (var value in owned)
            {
                value.Dispose();
            }
        }
    }

    /// <summary>
    /// Whether trials of <paramref name="layer"/> run a suffix from a cached cut rather than the whole graph: the cut
    /// plan (see <see cref="CutPlanner"/>) gives the layer a cut when the downstream work it saves over the sweep's
    /// trials repays the cut's session build within the memory allowed.
    /// </summary>
    public bool PrefersSuffix(WeightLayer layer, int trials) => PlannedCut(layer, trials) > 0;

    /// <summary>Runs only the graph downstream of <paramref name="layer"/>, with its weight replaced (and its activation quantized when asked).</summary>
    internal IReadOnlyList<OutputTensor> RunSuffix(WeightLayer layer, float[] weight, bool quantizeActivation = false)
    {
        if (!_options.SuffixRuns)
        {
            throw new InvalidOperationException("Suffix runs are off for this session.");
        }

        var cut = PlannedCut(layer, AssumedTrialsPerLayer);
        return cut > 0
            ? RunSuffixFrom(cut, layer, weight, quantizeActivation)
            : RunFull(new Dictionary<string, float[]>(StringComparer.Ordinal) { [layer.Name] = weight }, quantizeActivation ? [layer.Name] : null);
    }

    /// <summary>Runs the graph from the cached cut at <paramref name="cut"/> with one layer's weight (and corrected bias) replaced.</summary>
    private List<OutputTensor> RunSuffixFrom(int cut, WeightLayer layer, float[] weight, bool quantizeActivation, float[]? bias = null)
    {
        var cached = _cachedActivations ?? throw new InvalidOperationException("No activations are cached for suffix runs.");
        var session = SuffixSession(cut);
        using var value = OrtTensors.Wrap(weight, layer.Shape.ToArray());
        var overrides = new Dictionary<string, OrtValue>(StringComparer.Ordinal) { [layer.WeightName] = value };
        var owned = new List<OrtValue>();
        AddBiases(overrides, owned, Single(layer, bias));
        SwitchOn(overrides, quantizeActivation ? [layer.Name] : []);
        List<OutputTensor> suffixOutputs;
        try
        {
            suffixOutputs = Run(session, session.OutputNames, overrides, cached);
        }
        finally
        {
            owned.ForEach(v => v.Dispose());
        }

        return WithReferenceOutputs(suffixOutputs);
    }

    /// <summary>
    /// The model's outputs in reference order from a suffix run's: outputs made before the cut do not depend on the layer,
    /// so they are the reference outputs.
    /// </summary>
    private List<OutputTensor> WithReferenceOutputs(IEnumerable<OutputTensor> suffixOutputs)
    {
        var byName = suffixOutputs.ToDictionary(o => o.Name, StringComparer.Ordinal);
        return ReferenceOutputs.Select(r => byName.TryGetValue(r.Name, out var o) ? o : r).ToList();
    }

    public void Dispose()
    {
        _suffix?.Session.Dispose();
        _stacked?.Session.Dispose();
        _full.Dispose();
        _runOptions.Dispose();
        _sessionOptions.Dispose();
        _switchOff?.Dispose();
        _switchOn?.Dispose();
        foreach (var value in _fp32Values.Values)
        {
            value.Dispose();
        }

        DisposeFeeds(_dataFeeds);
        if (_cachedActivations is not null)
        {
            DisposeFeeds(_cachedActivations);
        }
    }

    private static Dictionary<string, float[]>? Single(WeightLayer layer, float[]? bias) =>
        bias is null ? null : new Dictionary<string, float[]>(StringComparer.Ordinal) { [layer.Name] = bias };

    private void AddBiases(Dictionary<string, OrtValue> overrides, List<OrtValue> owned, IReadOnlyDictionary<string, float[]>? biasesByLayer)
    {
        foreach (var (name, bias) in biasesByLayer ?? new Dictionary<string, float[]>())
        {
            var site = _biasSites.TryGetValue(name, out var found) ? found : throw new InvalidOperationException($"Layer '{name}' has no bias site in this session.");
            var value = OrtTensors.Wrap(bias, site.Dims);
            owned.Add(value);
            overrides[site.InputName] = value;
        }
    }

    private MetricSet Compare(IReadOnlyList<OutputTensor> outputs) =>
        OutputComparer.Compare(ReferenceOutputs, outputs, _data.Labels, _options.MetricSpace);

    /// <summary>Runs the FP32 model once on the first <paramref name="samples"/> samples (one run) and returns each output's shape, by name.</summary>
    private Dictionary<string, long[]> Probe(int samples)
    {
        var owned = new List<OrtValue>();
        try
        {
            var feeds = new Dictionary<string, OrtValue>(StringComparer.Ordinal);
            for (var i = 0; i < _model.Inputs.Count; i++)
            {
                var value = OrtTensors.SliceSamples(_data.Inputs[i], _data.SampleAxes[i], 0, samples, _plan.RowsFed(samples));
                owned.Add(value);
                feeds[_model.Inputs[i].Name] = value;
            }

            foreach (var name in _full.InputNames.Where(n => !feeds.ContainsKey(n)))
            {
                feeds[name] = _fp32Values.TryGetValue(name, out var weight) ? weight : _switchOff ?? throw new InvalidOperationException($"No value for session input '{name}'.");
            }

            using var results = _full.Run(_runOptions, feeds.Keys.ToList(), feeds.Values.ToList(), _full.OutputNames);
            return _full.OutputNames.Select((n, o) => (n, results[o].GetTensorTypeAndShape().Shape)).ToDictionary(p => p.n, p => p.Shape, StringComparer.Ordinal);
        }
        finally
        {
            owned.ForEach(v => v.Dispose());
        }
    }

    private WeightLayer Layer(string name) =>
        _model.Layers.FirstOrDefault(l => l.Name == name)
        ?? throw new EngineException("unknown-layer", $"The model has no layer named '{name}'.");

    private InferenceSession SuffixSession(int cut)
    {
        if (_suffix is { } current && current.Cut == cut)
        {
            return current.Session;
        }

        // Sweeps go layer by layer in graph order, so one suffix session at a time is enough.
        _suffix?.Session.Dispose();
        _suffix = null;
        var suffix = _slicer.Suffix(cut, _activationTypes);
        var clock = Stopwatch.StartNew();
        var session = new InferenceSession(suffix.ToByteArray(), _sessionOptions);
        _suffixBuildMilliseconds += clock.Elapsed.TotalMilliseconds;
        _suffixBuilds++;
        _suffix = (cut, session);
        return session;
    }

    /// <summary>The cut a layer's trials run from (0: the whole graph), planning the cuts on first use.</summary>
    private int PlannedCut(WeightLayer layer, int trialsForLayer)
    {
        EnsureCutPlan(null, trialsForLayer);
        return CutServing(CutPosition(layer));
    }

    /// <summary>The cut a suffix starting at <paramref name="position"/> runs from under the current plan (0: the whole graph).</summary>
    private int CutServing(int position) => _cutPlan is null || _cachedActivations is null ? 0 : _cutPlan.CutFor(position);

    /// <summary>
    /// Chooses the cut points once and caches their activations. Pending trials by layer when the sweep says them,
    /// else <paramref name="assumedTrials"/> for every layer.
    /// </summary>
    private CutPlan? EnsureCutPlan(IReadOnlyDictionary<string, int>? pending, int assumedTrials = AssumedTrialsPerLayer)
    {
        if (!_options.SuffixRuns)
        {
            return null;
        }

        if (_cutPlan is not null)
        {
            return _cutPlan;
        }

        var demands = _model.Layers
            .Select(l => new CutPlanner.LayerDemand(CutPosition(l), pending is null ? assumedTrials : pending.GetValueOrDefault(l.Name)))
            .Where(d => d.Trials > 0)
            .ToList();
        var perSample = new Dictionary<int, long>();
        long CacheBytes(int position)
        {
            if (!perSample.TryGetValue(position, out var bytes))
            {
                bytes = _slicer.CutSet(position).Where(n => !_slicer.IsGraphInput(n)).Sum(n => ProbeBytes(n));
                perSample[position] = bytes;
            }

            return (long)Math.Ceiling(bytes / (double)_probeRows * _data.SampleCount);
        }

        CutPlan plan;
        if (_options.CutEveryLayer || _nodeCosts is null)
        {
            // Every layer its own cut (or, without measured shapes, the share of nodes skipped as the cost).
            var positions = demands.Select(d => d.Position).Where(p => p > 0).Distinct().Order().ToList();
            plan = _options.CutEveryLayer
                ? new CutPlan(positions, 0, positions.Sum(CacheBytes))
                : CutPlanner.Choose(demands, p => ForwardPassMilliseconds * (_slicer.NodeCount - p) / _slicer.NodeCount, BuildMilliseconds, CacheBytes, _cacheBudgetBytes);
        }
        else
        {
            var costs = _nodeCosts;
            var perOperation = ForwardPassMilliseconds / Math.Max(1, costs.Downstream(0));
            plan = CutPlanner.Choose(demands, p => costs.Downstream(p) * perOperation, BuildMilliseconds, CacheBytes, _cacheBudgetBytes);
        }

        _cutPlan = plan;
        _cachedActivations = plan.Cuts.Count == 0 ? null : CacheCutActivations(plan.Cuts);
        var whole = demands.Sum(d => d.Trials) * ForwardPassMilliseconds;
        _layoutNote = _cachedActivations is null
            ? $"{_batchReason}; every trial runs the whole graph (no cut repays its session build{(plan.Cuts.Count > 0 ? " within the memory allowed" : string.Empty)})"
            : string.Create(
                System.Globalization.CultureInfo.InvariantCulture,
                $"{_batchReason}; {plan.Cuts.Count} cut points shared by {demands.Count} layers (nodes {string.Join(", ", plan.Cuts)} of {_slicer.NodeCount}), chosen by downstream FLOPs and a {SessionBuildMilliseconds:0} ms measured session build, caching {plan.CacheBytes / 1048576.0:0.#} MiB of activations (allowed {_cacheBudgetBytes / 1048576.0:0.#} MiB); estimated {plan.EstimatedMilliseconds / 1000:0.0} s of runs and builds against {whole / 1000:0.0} s of whole-graph runs");
        return plan;
    }

    /// <summary>
    /// The sweep's limit under the cost model: every trial running only the graph downstream of its own layer (no build,
    /// no caching), in whole forward passes (FLOP-weighted). For the benchmark's "ideal" column.
    /// </summary>
    internal double IdealSweepPasses(IReadOnlyDictionary<string, int> trialsByLayer)
    {
        var costs = _nodeCosts ?? throw new InvalidOperationException("No node costs: the shape probe failed on this model.");
        return _model.Layers.Sum(l => trialsByLayer.GetValueOrDefault(l.Name) * costs.Downstream(Math.Max(0, CutPosition(l)))) / Math.Max(1, costs.Downstream(0));
    }

    /// <summary>A suffix build, estimated from the measured build of the whole graph by the share of nodes it keeps.</summary>
    private double BuildMilliseconds(int position) =>
        SessionBuildMilliseconds * Math.Max(1, _slicer.NodeCount - position) / Math.Max(1, _slicer.NodeCount);

    private long ProbeBytes(string tensor) =>
        _probeShapes.TryGetValue(tensor, out var shape) ? shape.Aggregate(sizeof(float), (long product, long d) => product * Math.Max(d, 0)) : 0;

    /// <summary>
    /// Runs the first sample (or the model's fixed batch) through the weights-as-inputs model with every node output
    /// tapped, and returns every tensor's shape by name with the rows fed. Shapes of a model ONNX Runtime cannot tap
    /// this way (non-tensor outputs) are left empty: the planner then falls back to node counts.
    /// </summary>
    private (IReadOnlyDictionary<string, long[]> Shapes, int Rows) ProbeShapes(global::Onnx.ModelProto plain)
    {
        var rows = _data.SamplesPerRun ?? 1;
        var shapes = new Dictionary<string, long[]>(StringComparer.Ordinal);
        foreach (var layer in _model.Layers)
        {
            shapes[layer.WeightName] = layer.Shape.ToArray();
        }

        foreach (var initializer in plain.Graph.Initializer)
        {
            shapes[initializer.Name] = initializer.Dims.ToArray();
        }

        var owned = new List<OrtValue>();
        try
        {
            var tapped = plain.Graph.Node.SelectMany(n => n.Output).Where(o => o.Length > 0).Distinct(StringComparer.Ordinal).ToList();
            using var session = new InferenceSession(new GraphSlicer(plain).WithExtraOutputs(tapped).ToByteArray(), _sessionOptions);
            var feeds = new Dictionary<string, OrtValue>(StringComparer.Ordinal);
            for (var i = 0; i < _model.Inputs.Count; i++)
            {
                var value = OrtTensors.SliceSamples(_data.Inputs[i], _data.SampleAxes[i], 0, Math.Min(rows, _data.SampleCount), rows);
                owned.Add(value);
                feeds[_model.Inputs[i].Name] = value;
                shapes[_model.Inputs[i].Name] = value.GetTensorTypeAndShape().Shape;
            }

            foreach (var name in session.InputNames.Where(n => !feeds.ContainsKey(n)))
            {
                feeds[name] = _fp32Values[name];
            }

            var names = session.OutputNames.ToList();
            using var results = session.Run(_runOptions, feeds.Keys.ToList(), feeds.Values.ToList(), names);
            for (var o = 0; o < names.Count; o++)
            {
                if (results[o].OnnxType == OnnxValueType.ONNX_TYPE_TENSOR)
                {
                    shapes[names[o]] = results[o].GetTensorTypeAndShape().Shape;
                }
            }

            return (shapes, rows);
        }
        catch (Exception e) when (e is OnnxRuntimeException or KeyNotFoundException)
        {
            return (new Dictionary<string, long[]>(StringComparer.Ordinal), rows);
        }
        finally
        {
            owned.ForEach(v => v.Dispose());
        }
    }

    private bool QuantizesActivation(LayerSetting setting) =>
        _options.Activations is not null && BitWidths.IsInteger(setting.Bits);

    /// <summary>
    /// Whether a layer has an input activation to quantize: a Gather table's input is integer indices and a
    /// recurrent R multiplies the op's internal state, so those layers stay weight-only under --activations.
    /// </summary>
    private bool HasActivation(string layerName) => _switchedLayers.Contains(layerName) || !IsWeightOnlyLayer(layerName);

    private bool IsWeightOnlyLayer(string layerName) =>
        Layer(layerName) is { Op: "Gather" } || layerName.EndsWith(".R", StringComparison.Ordinal) && Layer(layerName).Op is "LSTM" or "GRU" or "RNN";

    private bool IsSwitch(string name) => _switchNames.Contains(name);

    private void SwitchOn(Dictionary<string, OrtValue> overrides, IEnumerable<string> layers)
    {
        foreach (var name in layers)
        {
            if (_switchOn is null || !_switchedLayers.Contains(name))
            {
                throw new EngineException(
                    "activations-unavailable",
                    $"The activation of layer '{name}' cannot be quantized: activation quantization is off for this session, or the layer sits inside an If/Loop/Scan body.");
            }

            overrides[ActivationQdq.SwitchName(name)] = _switchOn;
        }
    }

    /// <summary>Where a suffix for <paramref name="layer"/> starts: its first weight reader, or its activation switch when that comes first.</summary>
    private int CutPosition(WeightLayer layer)
    {
        var position = _slicer.FirstReader(layer.WeightName);
        if (_switchedLayers.Contains(layer.Name))
        {
            var switchPosition = _slicer.FirstReader(ActivationQdq.SwitchName(layer.Name));
            if (switchPosition >= 0 && (position < 0 || switchPosition < position))
            {
                position = switchPosition;
            }
        }

        return position;
    }

    /// <summary>
    /// Runs the FP32 model once over the calibration set with every layer's input activation as an extra
    /// output and turns each tensor's range into an 8-bit scale and zero point. Consumers inside
    /// If/Loop/Scan bodies are left out: their inputs cannot be read from outside the body.
    /// </summary>
    private List<ActivationQuantization> Calibrate(global::Onnx.ModelProto plain, ActivationCalibration calibration)
    {
        var nodes = new Dictionary<string, global::Onnx.NodeProto>(StringComparer.Ordinal);
        foreach (var node in plain.Graph.Node)
        {
            nodes.TryAdd(node.Name, node);
        }

        var sites = new List<(string Layer, string Consumer, string Tensor)>();
        foreach (var layer in _model.Layers)
        {
            foreach (var consumer in layer.Consumers)
            {
                if (nodes.TryGetValue(consumer, out var node) && node.Input.Count > 1 && node.Input[1] == layer.WeightName && node.Input[0].Length > 0)
                {
                    sites.Add((layer.Name, consumer, node.Input[0]));
                }
            }
        }

        var tensors = sites.Select(s => s.Tensor).Distinct(StringComparer.Ordinal).ToList();
        var ranges = MeasureRanges(plain, tensors, calibration);
        return sites.Select(s =>
        {
            var (scale, zeroPoint) = ActivationQuantization.ParametersFor(ranges.GetValueOrDefault(s.Tensor));
            return new ActivationQuantization(s.Layer, s.Consumer, s.Tensor, scale, zeroPoint);
        }).ToList();
    }

    private Dictionary<string, ClipRange> MeasureRanges(global::Onnx.ModelProto plain, IReadOnlyList<string> tensors, ActivationCalibration calibration)
    {
        var graphInputs = plain.Graph.Input.Select(i => i.Name).ToHashSet(StringComparer.Ordinal);
        var tapped = tensors.Where(t => !graphInputs.Contains(t)).ToList();
        var minMax = new Dictionary<string, ClipRange>(StringComparer.Ordinal);
        var kept = new Dictionary<string, List<float[]>>(StringComparer.Ordinal);
        long keptBytes = 0;
        using var session = new InferenceSession(new GraphSlicer(plain).WithExtraOutputs(tapped).ToByteArray(), _sessionOptions);
        for (var b = 0; b < _plan.BatchCount; b++)
        {
            var inputs = Feeds(session, b, overrides: null, extraFeeds: null);
            using var results = session.Run(_runOptions, inputs.Keys.ToList(), inputs.Values.ToList(), tapped);
            foreach (var name in tensors)
            {
                var index = tapped.IndexOf(name);
                var value = index >= 0 ? results[index] : _dataFeeds[b][name];
                if (value.GetTensorTypeAndShape().ElementDataType != TensorElementType.Float)
                {
                    throw new EngineException("activation-type-unsupported", $"The activation '{name}' is not FP32; only FP32 activations can be quantized. Search weights only.");
                }

                // Padding rows of a fixed batch repeat a real sample: they leave min and max unchanged.
                var values = value.GetTensorDataAsSpan<float>();
                if (values.IsEmpty)
                {
                    continue;
                }

                // Min and max propagate NaN, so both finite means every value is.
                if (!float.IsFinite(TensorPrimitives.Min(values)) || !float.IsFinite(TensorPrimitives.Max(values)))
                {
                    throw new EngineException("activation-not-finite", $"The activation '{name}' takes NaN or infinite values on the calibration set; check the dataset and the model.");
                }

                var range = ActivationQuantization.RangeOf(values, ActivationCalibration.MinMax);
                minMax[name] = minMax.TryGetValue(name, out var seen)
                    ? new ClipRange(Math.Min(seen.Low, range.Low), Math.Max(seen.High, range.High))
                    : range;
                if (calibration == ActivationCalibration.Percentile)
                {
                    keptBytes += (long)values.Length * sizeof(float);
                    if (keptBytes > _options.MaxCachedActivationBytes)
                    {
                        throw new EngineException(
                            "activations-too-large",
                            $"Percentile calibration of activations keeps every activation value of the calibration set, more than the {_options.MaxCachedActivationBytes >> 20} MiB allowed; use min-max calibration or fewer samples.");
                    }

                    (kept.TryGetValue(name, out var parts) ? parts : kept[name] = []).Add(values.ToArray());
                }
            }
        }

        if (calibration == ActivationCalibration.MinMax)
        {
            return minMax;
        }

        return kept.ToDictionary(
            p => p.Key,
            p => ActivationQuantization.RangeOf((float[])OrtTensors.Concatenate(p.Value), ActivationCalibration.Percentile),
            StringComparer.Ordinal);
    }

    private List<Dictionary<string, OrtValue>> BuildDataFeeds()
    {
        var feeds = new List<Dictionary<string, OrtValue>>(_plan.BatchCount);
        for (var b = 0; b < _plan.BatchCount; b++)
        {
            var (start, count) = _plan.Batch(b);
            var feed = new Dictionary<string, OrtValue>(StringComparer.Ordinal);
            for (var i = 0; i < _model.Inputs.Count; i++)
            {
                feed[_model.Inputs[i].Name] = OrtTensors.SliceSamples(_data.Inputs[i], _data.SampleAxes[i], start, count, _plan.RowsFed(count));
            }

            feeds.Add(feed);
        }

        return feeds;
    }

    /// <summary>
    /// One run of the model with the cut-set activations of <paramref name="cuts"/> as extra outputs; the
    /// activations are kept per batch. Turns suffix runs off when they would take more memory than allowed.
    /// </summary>
    private List<Dictionary<string, OrtValue>>? CacheCutActivations(IReadOnlyList<int> cuts)
    {
        var taps = new SortedSet<string>(StringComparer.Ordinal);
        foreach (var position in cuts)
        {
            taps.UnionWith(_slicer.CutSet(position).Where(n => !_slicer.IsGraphInput(n)));
        }

        var cache = new List<Dictionary<string, OrtValue>>();
        if (taps.Count == 0)
        {
            return Enumerable.Range(0, _plan.BatchCount).Select(_ => new Dictionary<string, OrtValue>(StringComparer.Ordinal)).ToList();
        }

        using var session = new InferenceSession(_slicer.WithExtraOutputs(taps).ToByteArray(), _sessionOptions);
        var names = taps.ToList();
        long bytes = 0;
        for (var b = 0; b < _plan.BatchCount; b++)
        {
            var inputs = Feeds(session, b, overrides: null, extraFeeds: null);
            using var results = session.Run(_runOptions, inputs.Keys.ToList(), inputs.Values.ToList(), names);
            var batch = new Dictionary<string, OrtValue>(StringComparer.Ordinal);
            cache.Add(batch);
            for (var i = 0; i < names.Count; i++)
            {
                // Copy out: the values returned by Run die with the results collection.
                var data = OrtTensors.CopyRows(results[i], int.MaxValue, out var shape);
                bytes += Buffer.ByteLength(data);
                batch[names[i]] = OrtTensors.Wrap(data, shape);
                var type = results[i].GetTensorTypeAndShape();
                _activationTypes[names[i]] = ((int)type.ElementDataType, shape.Length);
            }

            // The planner priced the cache from a one-sample probe; a model whose activations grow faster than its samples
            // (or the every-layer cuts of a test) may still overrun it.
            if (bytes > Math.Max(_cacheBudgetBytes, _options.CutEveryLayer ? _options.MaxCachedActivationBytes : 0))
            {
                DisposeFeeds(cache);
                return null;
            }
        }

        return cache;
    }

    private Dictionary<string, OrtValue> Feeds(
        InferenceSession session,
        int batch,
        IReadOnlyDictionary<string, OrtValue>? overrides,
        IReadOnlyList<Dictionary<string, OrtValue>>? extraFeeds)
    {
        var feeds = new Dictionary<string, OrtValue>(StringComparer.Ordinal);
        foreach (var name in session.InputNames)
        {
            if (overrides is not null && overrides.TryGetValue(name, out var value))
            {
                feeds[name] = value;
            }
            else if (_fp32Values.TryGetValue(name, out value))
            {
                feeds[name] = value;
            }
            else if (_dataFeeds[batch].TryGetValue(name, out value))
            {
                feeds[name] = value;
            }
            else if (extraFeeds is not null && extraFeeds[batch].TryGetValue(name, out value))
            {
                feeds[name] = value;
            }
            else if (_switchOff is not null && IsSwitch(name))
            {
                feeds[name] = _switchOff;
            }
            else
            {
                throw new InvalidOperationException($"No value for session input '{name}'.");
            }
        }

        return feeds;
    }

    private List<OutputTensor> Run(
        InferenceSession session,
        IReadOnlyList<string> outputNames,
        IReadOnlyDictionary<string, OrtValue>? feedsOverride,
        IReadOnlyList<Dictionary<string, OrtValue>>? extraFeeds)
    {
        var parts = outputNames.Select(_ => new List<Array>(_plan.BatchCount)).ToList();
        var shapes = outputNames.Select(_ => new List<long[]>(_plan.BatchCount)).ToList();
        var counts = new List<int>(_plan.BatchCount);
        for (var b = 0; b < _plan.BatchCount; b++)
        {
            var (_, count) = _plan.Batch(b);
            counts.Add(count);
            var inputs = Feeds(session, b, feedsOverride, extraFeeds);
            using var results = session.Run(_runOptions, inputs.Keys.ToList(), inputs.Values.ToList(), outputNames.ToList());
            for (var o = 0; o < outputNames.Count; o++)
            {
                parts[o].Add(OrtTensors.CopyRows(results[o], int.MaxValue, out var shape));
                shapes[o].Add(shape);
            }
        }

        return Assemble(outputNames, parts, shapes, counts);
    }

    /// <summary>Joins each output's per-run parts into one tensor over the calibration set (along its sample axis, or stacked when it has none).</summary>
    private List<OutputTensor> Assemble(IReadOnlyList<string> outputNames, List<List<Array>> parts, List<List<long[]>> shapes, List<int> counts)
    {
        var outputs = new List<OutputTensor>(outputNames.Count);
        for (var o = 0; o < outputNames.Count; o++)
        {
            var axis = _outputAxes[outputNames[o]];
            Array data;
            long[] shape;
            if (axis is int k)
            {
                data = SampleSlicer.Concatenate(parts[o], shapes[o], k, counts, out shape);
            }
            else
            {
                // No sample axis: one value per run, stacked on a new leading axis.
                data = OrtTensors.Concatenate(parts[o]);
                shape = [parts[o].Count, .. shapes[o][0]];
            }

            outputs.Add(new OutputTensor(outputNames[o], OrtTensors.ToFloat(data), shape, axis));
        }

        return outputs;
    }

    private static void DisposeFeeds(IEnumerable<Dictionary<string, OrtValue>> feeds)
    {
        foreach (var feed in feeds)
        {
            foreach (var value in feed.Values)
            {
                value.Dispose();
            }
        }
    }
}

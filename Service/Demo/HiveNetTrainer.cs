using System.Numerics.Tensors;

namespace Bitbudget.Service.Demo;

/// <summary>
/// Mini-batch training of <see cref="HiveNet"/> with a hand-written backward pass: softmax
/// cross-entropy, BN in training mode (batch statistics, running statistics kept for inference)
/// and Adam. Single-threaded with a fixed visiting order, so a run is repeatable bit for bit.
/// </summary>
internal sealed class HiveNetTrainer
{
    // Adam as published (Kingma and Ba, 2015); the betas and epsilon are the paper's defaults.
    private const float Beta1 = 0.9f;
    private const float Beta2 = 0.999f;
    private const float AdamEpsilon = 1e-8f;

    // The running-statistics momentum most frameworks default to (common practice).
    private const float RunningMomentum = 0.1f;

    private static readonly int P1 = HiveNet.Positions1;
    private static readonly int P2 = HiveNet.Positions2;
    private const int C1 = HiveNet.Channels1;
    private const int C2 = HiveNet.Channels2;
    private const int Hid = HiveNet.Hidden;
    private const int Cls = HiveNet.Classes;
    private static readonly int Flat = HiveNet.Flattened;

    private readonly HiveNet _net;
    private readonly int _batchSize;
    private readonly double _peakLearningRate;
    private readonly Parameter[] _parameters;

    // Per-batch activations kept for the backward pass.
    private readonly float[] _columns1;
    private readonly float[] _normalised1;
    private readonly float[] _activated1;
    private readonly float[] _columns2;
    private readonly float[] _normalised2;
    private readonly float[] _activated2;
    private readonly float[] _hidden;
    private readonly float[] _probabilities;

    // Gradient scratch.
    private readonly float[] _gradient2;
    private readonly float[] _gradient1;
    private readonly float[] _gradientColumns2;
    private readonly float[] _gradientHidden;

    private readonly float[] _conv1WeightGradient;
    private readonly float[] _bn1ScaleGradient;
    private readonly float[] _bn1BiasGradient;
    private readonly float[] _conv2WeightGradient;
    private readonly float[] _bn2ScaleGradient;
    private readonly float[] _bn2BiasGradient;
    private readonly float[] _fc1WeightGradient;
    private readonly float[] _fc1BiasGradient;
    private readonly float[] _fc2WeightGradient;
    private readonly float[] _fc2BiasGradient;

    private readonly float[] _inverseDeviation1 = new float[C1];
    private readonly float[] _inverseDeviation2 = new float[C2];
    private int _step;

    public HiveNetTrainer(HiveNet net, int batchSize, double learningRate)
    {
        ArgumentOutOfRangeException.ThrowIfLessThan(batchSize, 2);
        _net = net;
        _batchSize = batchSize;
        _peakLearningRate = learningRate;

        _columns1 = new float[batchSize * 9 * P1];
        _normalised1 = new float[batchSize * C1 * P1];
        _activated1 = new float[batchSize * C1 * P1];
        _columns2 = new float[batchSize * C1 * 9 * P2];
        _normalised2 = new float[batchSize * Flat];
        _activated2 = new float[batchSize * Flat];
        _hidden = new float[batchSize * Hid];
        _probabilities = new float[batchSize * Cls];
        _gradient2 = new float[batchSize * Flat];
        _gradient1 = new float[batchSize * C1 * P1];
        _gradientColumns2 = new float[C1 * 9 * P2];
        _gradientHidden = new float[batchSize * Hid];

        _conv1WeightGradient = new float[net.Conv1Weight.Length];
        _bn1ScaleGradient = new float[C1];
        _bn1BiasGradient = new float[C1];
        _conv2WeightGradient = new float[net.Conv2Weight.Length];
        _bn2ScaleGradient = new float[C2];
        _bn2BiasGradient = new float[C2];
        _fc1WeightGradient = new float[net.Fc1Weight.Length];
        _fc1BiasGradient = new float[Hid];
        _fc2WeightGradient = new float[net.Fc2Weight.Length];
        _fc2BiasGradient = new float[Cls];

        _parameters =
        [
            new Parameter(net.Conv1Weight, _conv1WeightGradient),
            new Parameter(net.Bn1Scale, _bn1ScaleGradient),
            new Parameter(net.Bn1Bias, _bn1BiasGradient),
            new Parameter(net.Conv2Weight, _conv2WeightGradient),
            new Parameter(net.Bn2Scale, _bn2ScaleGradient),
            new Parameter(net.Bn2Bias, _bn2BiasGradient),
            new Parameter(net.Fc1Weight, _fc1WeightGradient),
            new Parameter(net.Fc1Bias, _fc1BiasGradient),
            new Parameter(net.Fc2Weight, _fc2WeightGradient),
            new Parameter(net.Fc2Bias, _fc2BiasGradient),
        ];
    }

    /// <summary>
    /// Trains for <paramref name="epochs"/> passes, reshuffling each pass with <paramref name="shuffleSeed"/>;
    /// the learning rate follows a cosine from its peak to zero (Loshchilov and Hutter, 2017).
    /// A last partial batch smaller than 2 is skipped because BN needs two samples for a variance.
    /// </summary>
    public IReadOnlyList<TrainingEpoch> Train(HiveSoundSet data, int epochs, ulong shuffleSeed, Action<TrainingEpoch>? onEpoch = null)
    {
        var random = new Pcg32(shuffleSeed, stream: 11);
        var order = new int[data.Count];
        for (int i = 0; i < order.Length; i++)
        {
            order[i] = i;
        }

        int batchesPerEpoch = (data.Count + _batchSize - 1) / _batchSize;
        int totalSteps = Math.Max(1, batchesPerEpoch * epochs);
        var batchInput = new float[_batchSize * P1];
        var batchLabels = new long[_batchSize];
        var history = new List<TrainingEpoch>(epochs);
        for (int epoch = 1; epoch <= epochs; epoch++)
        {
            for (int i = order.Length - 1; i > 0; i--)
            {
                int j = random.NextInt(i + 1);
                (order[i], order[j]) = (order[j], order[i]);
            }

            double lossSum = 0;
            int correct = 0;
            int seen = 0;
            for (int start = 0; start < order.Length; start += _batchSize)
            {
                int size = Math.Min(_batchSize, order.Length - start);
                if (size < 2)
                {
                    continue;
                }

                for (int b = 0; b < size; b++)
                {
                    data.Patch(order[start + b]).CopyTo(batchInput.AsSpan(b * P1, P1));
                    batchLabels[b] = data.Labels[order[start + b]];
                }

                double progress = (double)_step / totalSteps;
                double learningRate = 0.5 * _peakLearningRate * (1.0 + Math.Cos(Math.PI * progress));
                (double batchLoss, int batchCorrect) = Step(batchInput.AsSpan(0, size * P1), batchLabels.AsSpan(0, size), size, (float)learningRate);
                lossSum += batchLoss * size;
                correct += batchCorrect;
                seen += size;
            }

            var record = new TrainingEpoch(epoch, lossSum / Math.Max(1, seen), (double)correct / Math.Max(1, seen));
            history.Add(record);
            onEpoch?.Invoke(record);
        }

        return history;
    }

    private (double Loss, int Correct) Step(ReadOnlySpan<float> input, ReadOnlySpan<long> labels, int size, float learningRate)
    {
        (double loss, int correct) = Backpropagate(input, labels, size);
        AdamUpdate(learningRate);
        return (loss, correct);
    }

    /// <summary>The gradient buffer the last <see cref="Backpropagate"/> filled for one of the network's parameter arrays.</summary>
    public float[] GradientOf(float[] parameter) =>
        Array.Find(_parameters, p => ReferenceEquals(p.Value, parameter))?.Gradient
        ?? throw new ArgumentException("The array is not a parameter of this trainer's network.", nameof(parameter));

    /// <summary>
    /// One forward and backward pass over a batch in training mode: returns the mean cross-entropy and
    /// the number of correct patches, and leaves d(loss)/d(parameter) in the gradient buffers.
    /// Updates the BN running statistics as training does, but not the parameters.
    /// </summary>
    public (double Loss, int Correct) Backpropagate(ReadOnlySpan<float> input, ReadOnlySpan<long> labels, int size)
    {
        if (size < 2 || size > _batchSize || input.Length != size * P1 || labels.Length != size)
        {
            throw new ArgumentException($"A batch must hold 2..{_batchSize} patches with one label each.");
        }

        foreach (Parameter parameter in _parameters)
        {
            Array.Clear(parameter.Gradient);
        }

        // ---- forward ----
        Span<float> z1 = _gradient1.AsSpan(0, size * C1 * P1); // reused: holds pre-BN values until the backward pass overwrites them
        for (int b = 0; b < size; b++)
        {
            Span<float> columns = _columns1.AsSpan(b * 9 * P1, 9 * P1);
            ConvolutionKernels.Unfold(input.Slice(b * P1, P1), 1, HiveNet.InputSize, 1, columns);
            ConvolutionKernels.Multiply(_net.Conv1Weight, columns, C1, P1, z1.Slice(b * C1 * P1, C1 * P1));
        }

        BatchNormForward(z1, size, C1, P1, _net.Bn1Scale, _net.Bn1Bias, _net.Bn1Mean, _net.Bn1Variance, _inverseDeviation1, _normalised1, _activated1);

        Span<float> z2 = _gradient2.AsSpan(0, size * Flat);
        for (int b = 0; b < size; b++)
        {
            Span<float> columns = _columns2.AsSpan(b * C1 * 9 * P2, C1 * 9 * P2);
            ConvolutionKernels.Unfold(_activated1.AsSpan(b * C1 * P1, C1 * P1), C1, HiveNet.InputSize, HiveNet.Stride2, columns);
            ConvolutionKernels.Multiply(_net.Conv2Weight, columns, C2, P2, z2.Slice(b * Flat, Flat));
        }

        BatchNormForward(z2, size, C2, P2, _net.Bn2Scale, _net.Bn2Bias, _net.Bn2Mean, _net.Bn2Variance, _inverseDeviation2, _normalised2, _activated2);

        double loss = 0;
        int correct = 0;
        Span<float> logits = stackalloc float[Cls];
        for (int b = 0; b < size; b++)
        {
            ReadOnlySpan<float> features = _activated2.AsSpan(b * Flat, Flat);
            Span<float> hidden = _hidden.AsSpan(b * Hid, Hid);
            for (int j = 0; j < Hid; j++)
            {
                hidden[j] = Math.Max(0f, TensorPrimitives.Dot(_net.Fc1Weight.AsSpan(j * Flat, Flat), features) + _net.Fc1Bias[j]);
            }

            for (int j = 0; j < Cls; j++)
            {
                logits[j] = TensorPrimitives.Dot(_net.Fc2Weight.AsSpan(j * Hid, Hid), hidden) + _net.Fc2Bias[j];
            }

            Span<float> probabilities = _probabilities.AsSpan(b * Cls, Cls);
            TensorPrimitives.SoftMax(logits, probabilities);
            int label = (int)labels[b];
            loss -= Math.Log(Math.Max(probabilities[label], 1e-30f));
            if (TensorPrimitives.IndexOfMax(logits) == label)
            {
                correct++;
            }
        }

        // ---- backward ----
        float perSample = 1f / size;
        Span<float> gradientLogits = stackalloc float[Cls];
        for (int b = 0; b < size; b++)
        {
            // d(mean cross-entropy)/d(logits) = (softmax - one-hot) / batch.
            for (int j = 0; j < Cls; j++)
            {
                gradientLogits[j] = (_probabilities[(b * Cls) + j] - (labels[b] == j ? 1f : 0f)) * perSample;
            }

            ReadOnlySpan<float> hidden = _hidden.AsSpan(b * Hid, Hid);
            Span<float> gradientHidden = _gradientHidden.AsSpan(b * Hid, Hid);
            gradientHidden.Clear();
            for (int j = 0; j < Cls; j++)
            {
                Span<float> weightGradient = _fc2WeightGradient.AsSpan(j * Hid, Hid);
                TensorPrimitives.MultiplyAdd(hidden, gradientLogits[j], weightGradient, weightGradient);
                _fc2BiasGradient[j] += gradientLogits[j];
                TensorPrimitives.MultiplyAdd(_net.Fc2Weight.AsSpan(j * Hid, Hid), gradientLogits[j], gradientHidden, gradientHidden);
            }

            for (int j = 0; j < Hid; j++)
            {
                if (hidden[j] <= 0f)
                {
                    gradientHidden[j] = 0f;
                }
            }

            ReadOnlySpan<float> features = _activated2.AsSpan(b * Flat, Flat);
            Span<float> gradientFeatures = _gradient2.AsSpan(b * Flat, Flat);
            gradientFeatures.Clear();
            for (int j = 0; j < Hid; j++)
            {
                float g = gradientHidden[j];
                if (g == 0f)
                {
                    continue;
                }

                Span<float> weightGradient = _fc1WeightGradient.AsSpan(j * Flat, Flat);
                TensorPrimitives.MultiplyAdd(features, g, weightGradient, weightGradient);
                _fc1BiasGradient[j] += g;
                TensorPrimitives.MultiplyAdd(_net.Fc1Weight.AsSpan(j * Flat, Flat), g, gradientFeatures, gradientFeatures);
            }
        }

        Span<float> gradientZ2 = _gradient2.AsSpan(0, size * Flat);
        BatchNormBackward(gradientZ2, size, C2, P2, _net.Bn2Scale, _inverseDeviation2, _normalised2, _activated2, _bn2ScaleGradient, _bn2BiasGradient);

        Span<float> gradientActivated1 = _gradient1.AsSpan(0, size * C1 * P1);
        gradientActivated1.Clear();
        int depth2 = C1 * 9;
        for (int b = 0; b < size; b++)
        {
            ReadOnlySpan<float> columns = _columns2.AsSpan(b * depth2 * P2, depth2 * P2);
            ReadOnlySpan<float> gradientOut = gradientZ2.Slice(b * Flat, Flat);
            _gradientColumns2.AsSpan().Clear();
            for (int o = 0; o < C2; o++)
            {
                ReadOnlySpan<float> gradientRow = gradientOut.Slice(o * P2, P2);
                for (int k = 0; k < depth2; k++)
                {
                    _conv2WeightGradient[(o * depth2) + k] += TensorPrimitives.Dot(gradientRow, columns.Slice(k * P2, P2));
                    Span<float> columnGradient = _gradientColumns2.AsSpan(k * P2, P2);
                    TensorPrimitives.MultiplyAdd(gradientRow, _net.Conv2Weight[(o * depth2) + k], columnGradient, columnGradient);
                }
            }

            ConvolutionKernels.FoldAdd(_gradientColumns2, C1, HiveNet.InputSize, HiveNet.Stride2, gradientActivated1.Slice(b * C1 * P1, C1 * P1));
        }

        BatchNormBackward(gradientActivated1, size, C1, P1, _net.Bn1Scale, _inverseDeviation1, _normalised1, _activated1, _bn1ScaleGradient, _bn1BiasGradient);

        for (int b = 0; b < size; b++)
        {
            ReadOnlySpan<float> columns = _columns1.AsSpan(b * 9 * P1, 9 * P1);
            for (int o = 0; o < C1; o++)
            {
                ReadOnlySpan<float> gradientRow = gradientActivated1.Slice((b * C1 * P1) + (o * P1), P1);
                for (int k = 0; k < 9; k++)
                {
                    _conv1WeightGradient[(o * 9) + k] += TensorPrimitives.Dot(gradientRow, columns.Slice(k * P1, P1));
                }
            }
        }

        return (loss / size, correct);
    }

    /// <summary>Training-mode BN then Relu over [size, channels, positions]; updates the running statistics.</summary>
    private static void BatchNormForward(
        ReadOnlySpan<float> input, int size, int channels, int positions,
        float[] scale, float[] bias, float[] runningMean, float[] runningVariance,
        float[] inverseDeviation, float[] normalised, float[] activated)
    {
        int count = size * positions;
        for (int c = 0; c < channels; c++)
        {
            double sum = 0;
            for (int b = 0; b < size; b++)
            {
                sum += TensorPrimitives.Sum(input.Slice((b * channels * positions) + (c * positions), positions));
            }

            float mean = (float)(sum / count);
            double squares = 0;
            for (int b = 0; b < size; b++)
            {
                ReadOnlySpan<float> row = input.Slice((b * channels * positions) + (c * positions), positions);
                for (int p = 0; p < positions; p++)
                {
                    double d = row[p] - mean;
                    squares += d * d;
                }
            }

            // Normalise with the biased batch variance, keep the unbiased one for inference (common practice).
            float variance = (float)(squares / count);
            float inverse = 1f / MathF.Sqrt(variance + HiveNet.BatchNormEpsilon);
            inverseDeviation[c] = inverse;
            runningMean[c] = ((1f - RunningMomentum) * runningMean[c]) + (RunningMomentum * mean);
            runningVariance[c] = ((1f - RunningMomentum) * runningVariance[c]) + (RunningMomentum * (float)(squares / (count - 1)));

            for (int b = 0; b < size; b++)
            {
                int offset = (b * channels * positions) + (c * positions);
                ReadOnlySpan<float> row = input.Slice(offset, positions);
                Span<float> normalisedRow = normalised.AsSpan(offset, positions);
                Span<float> activatedRow = activated.AsSpan(offset, positions);
                TensorPrimitives.Subtract(row, mean, normalisedRow);
                TensorPrimitives.Multiply(normalisedRow, inverse, normalisedRow);
                TensorPrimitives.Multiply(normalisedRow, scale[c], activatedRow);
                TensorPrimitives.Add(activatedRow, bias[c], activatedRow);
                TensorPrimitives.Max(activatedRow, 0f, activatedRow);
            }
        }
    }

    /// <summary>
    /// Turns the gradient with respect to the Relu output (in place) into the gradient with respect
    /// to the BN input, using the standard batch-norm backward formula
    /// dx = inv / N * (N * dxhat - sum(dxhat) - xhat * sum(dxhat * xhat)) (Ioffe and Szegedy, 2015).
    /// </summary>
    private static void BatchNormBackward(
        Span<float> gradient, int size, int channels, int positions,
        float[] scale, float[] inverseDeviation, float[] normalised, float[] activated,
        float[] scaleGradient, float[] biasGradient)
    {
        int count = size * positions;
        for (int c = 0; c < channels; c++)
        {
            double sumGradient = 0;
            double sumGradientTimesNormalised = 0;
            for (int b = 0; b < size; b++)
            {
                int offset = (b * channels * positions) + (c * positions);
                Span<float> row = gradient.Slice(offset, positions);
                ReadOnlySpan<float> activatedRow = activated.AsSpan(offset, positions);
                ReadOnlySpan<float> normalisedRow = normalised.AsSpan(offset, positions);
                for (int p = 0; p < positions; p++)
                {
                    if (activatedRow[p] <= 0f)
                    {
                        row[p] = 0f;
                    }
                }

                sumGradient += TensorPrimitives.Sum(row);
                sumGradientTimesNormalised += TensorPrimitives.Dot(row, normalisedRow);
            }

            scaleGradient[c] += (float)sumGradientTimesNormalised;
            biasGradient[c] += (float)sumGradient;

            // With dxhat = scale * dy the formula becomes scale * inv * (dy - mean(dy) - xhat * mean(dy * xhat)).
            float meanGradient = (float)(sumGradient / count);
            float meanProduct = (float)(sumGradientTimesNormalised / count);
            float factor = scale[c] * inverseDeviation[c];
            for (int b = 0; b < size; b++)
            {
                int offset = (b * channels * positions) + (c * positions);
                Span<float> row = gradient.Slice(offset, positions);
                ReadOnlySpan<float> normalisedRow = normalised.AsSpan(offset, positions);
                for (int p = 0; p < positions; p++)
                {
                    row[p] = factor * (row[p] - meanGradient - (normalisedRow[p] * meanProduct));
                }
            }
        }
    }

    private void AdamUpdate(float learningRate)
    {
        _step++;
        float correction1 = 1f - MathF.Pow(Beta1, _step);
        float correction2 = 1f - MathF.Pow(Beta2, _step);
        foreach (Parameter parameter in _parameters)
        {
            float[] value = parameter.Value;
            float[] gradient = parameter.Gradient;
            float[] first = parameter.FirstMoment;
            float[] second = parameter.SecondMoment;
            for (int i = 0; i < value.Length; i++)
            {
                float g = gradient[i];
                first[i] = (Beta1 * first[i]) + ((1f - Beta1) * g);
                second[i] = (Beta2 * second[i]) + ((1f - Beta2) * g * g);
                float firstHat = first[i] / correction1;
                float secondHat = second[i] / correction2;
                value[i] -= learningRate * firstHat / (MathF.Sqrt(secondHat) + AdamEpsilon);
            }
        }
    }

    private sealed class Parameter(float[] value, float[] gradient)
    {
        public float[] Value { get; } = value;
        public float[] Gradient { get; } = gradient;
        public float[] FirstMoment { get; } = new float[value.Length];
        public float[] SecondMoment { get; } = new float[value.Length];
    }
}

using System.Numerics.Tensors;

namespace Bitbudget.Search.Quantization;

/// <summary>
/// Rounds a linear layer's weight column by column and pushes each column's rounding error onto the columns
/// not yet rounded, so that the layer's output on its calibration inputs moves as little as the grid allows:
/// the update of GPTQ (Frantar et al., 2022, Algorithm 1), itself the Optimal Brain Quantizer (Frantar &amp;
/// Alistarh, 2022) with a fixed column order. The grid (scale and zero point per channel or per tensor) is the
/// one nearest rounding uses for the same setting; only the integers differ.
/// <para>
/// Steps, from memory of the paper: H = 2 X Xᵀ over the calibration inputs; damping λ = 1% of the mean of H's
/// diagonal added to the diagonal; U = the upper Cholesky factor of H⁻¹ (H⁻¹ = UᵀU); for each column i in order,
/// q_i = quant(w_i), e = (w_i − q_i) / U_ii, and w_j −= e U_ij for every later column j, applied lazily in blocks
/// of <see cref="BlockColumns"/> columns (the paper's 128) so that the whole-matrix update is one pass per block.
/// An input that is always zero (H_ii = 0) gets H_ii = 1, as in the authors' published code (from memory); unlike
/// that code its weights are kept and rounded to nearest rather than set to zero, so inputs the calibration set
/// never drives still work as trained.
/// </para>
/// </summary>
public static class CompensatedRounding
{
    /// <summary>Columns per lazy update block (the paper's choice, from memory).</summary>
    public const int BlockColumns = 128;

    /// <summary>Damping added to H's diagonal, as a share of its mean diagonal value (the paper's 1%, from memory).</summary>
    public const double Damping = 0.01;

    /// <summary>
    /// The factor U of every block of <paramref name="moments"/> (see <see cref="Factor"/>), which depends on the inputs
    /// only: one per layer serves every bit width, scheme and clip.
    /// </summary>
    public static double[][] Factors(InputMoments moments)
    {
        ArgumentNullException.ThrowIfNull(moments);
        return Enumerable.Range(0, moments.Groups).Select(g => Factor(moments.SecondMoment(g), moments.Columns)).ToArray();
    }

    /// <summary>
    /// U, upper triangular and row-major, with U ᵀU = (H + λI)⁻¹ for H = 2 Σ x xᵀ (<paramref name="secondMoment"/> is
    /// Σ x xᵀ). Should rounding leave H not positive definite, the damping grows tenfold until it is.
    /// </summary>
    public static double[] Factor(ReadOnlySpan<double> secondMoment, int columns)
    {
        int d = columns;
        if (secondMoment.Length != (long)d * d)
        {
            throw new ArgumentException("The second moment must be Columns x Columns.", nameof(secondMoment));
        }

        var h = new double[secondMoment.Length];
        for (var i = 0; i < h.Length; i++)
        {
            h[i] = 2 * secondMoment[i];
        }

        double meanDiagonal = 0;
        for (var i = 0; i < d; i++)
        {
            if (h[(i * d) + i] <= 0)
            {
                h[(i * d) + i] = 1;
            }

            meanDiagonal += h[(i * d) + i];
        }

        meanDiagonal /= d;
        for (double damping = Damping; ; damping *= 10)
        {
            var damped = (double[])h.Clone();
            for (var i = 0; i < d; i++)
            {
                damped[(i * d) + i] += damping * meanDiagonal;
            }

            if (UpperFactorOfInverse(damped, d) is { } factor)
            {
                return factor;
            }

            if (damping > 1e3)
            {
                throw new EngineException("inputs-not-usable", "The layer's input second moments are not finite; check the calibration set for NaN or infinite values.");
            }
        }
    }

    /// <summary>
    /// Rounds a weight with compensation. The scales and zero points are nearest rounding's for <paramref name="setting"/>
    /// (so the result has the same grid and storage), the integers those the update picks. The update is greedy and
    /// damped, so it is not certain to beat nearest on every layer: each block keeps whichever of the two integer sets
    /// gives the lower output error Σ ‖ΔW x‖² on the calibration inputs, so the result is never worse than nearest there.
    /// <paramref name="factors"/> are <see cref="Factors"/> of <paramref name="moments"/> (computed once per layer).
    /// </summary>
    public static QuantizedWeight Round(
        ReadOnlySpan<float> weights,
        IReadOnlyList<long> shape,
        int channelAxis,
        LayerSetting setting,
        LinearLayout layout,
        InputMoments moments,
        IReadOnlyList<double[]> factors)
    {
        ArgumentNullException.ThrowIfNull(setting);
        ArgumentNullException.ThrowIfNull(moments);
        ArgumentNullException.ThrowIfNull(factors);
        var nearest = WeightQuantizer.Quantize(weights, shape, channelAxis, setting with { Rounding = RoundingMethod.Nearest });
        if (layout.Count != weights.Length || moments.Groups != layout.Groups || moments.Columns != layout.Columns
            || factors.Count != layout.Groups || factors.Any(f => f.Length != (long)layout.Columns * layout.Columns))
        {
            throw new EngineException("quantized-weight-mismatch", "The layer's linear layout or input moments do not fit its weight.");
        }

        var levels = (int[])nearest.Levels.Clone();
        var (qmin, qmax) = QuantGrid.For(setting.Bits, setting.Scheme);
        var channelOf = ChannelIndex(shape, nearest.Axis);
        var scales = new float[layout.Rows * layout.Columns];
        var zeroPoints = new int[scales.Length];
        var matrix = new double[scales.Length];
        for (var g = 0; g < layout.Groups; g++)
        {
            for (var r = 0; r < layout.Rows; r++)
            {
                for (var c = 0; c < layout.Columns; c++)
                {
                    var at = layout.Index(g, r, c);
                    var k = (r * layout.Columns) + c;
                    var channel = channelOf(at);
                    matrix[k] = weights[at];
                    scales[k] = nearest.Scales[channel];
                    zeroPoints[k] = nearest.ZeroPoints[channel];
                }
            }

            var original = (double[])matrix.Clone();
            var rounded = RoundMatrix(matrix, layout.Rows, layout.Columns, scales, zeroPoints, qmin, qmax, factors[g]);
            var nearestBlock = new int[rounded.Length];
            for (var r = 0; r < layout.Rows; r++)
            {
                for (var c = 0; c < layout.Columns; c++)
                {
                    nearestBlock[(r * layout.Columns) + c] = nearest.Levels[layout.Index(g, r, c)];
                }
            }

            var secondMoment = moments.SecondMoment(g);
            if (OutputError(original, rounded, scales, zeroPoints, layout.Columns, secondMoment) >= OutputError(original, nearestBlock, scales, zeroPoints, layout.Columns, secondMoment))
            {
                continue;
            }

            for (var r = 0; r < layout.Rows; r++)
            {
                for (var c = 0; c < layout.Columns; c++)
                {
                    levels[layout.Index(g, r, c)] = rounded[(r * layout.Columns) + c];
                }
            }
        }

        return nearest with { Levels = levels };
    }

    /// <summary>
    /// The update on one row-major [rows, columns] block with its per-value scale and zero point; returns the levels
    /// (row-major). <paramref name="matrix"/> is used as scratch.
    /// </summary>
    internal static int[] RoundMatrix(double[] matrix, int rows, int columns, float[] scales, int[] zeroPoints, int qmin, int qmax, double[] factor)
    {
        int d = columns;
        var levels = new int[rows * columns];
        var errors = new double[rows * BlockColumns];
        for (var start = 0; start < d; start += BlockColumns)
        {
            var end = Math.Min(start + BlockColumns, d);
            var width = end - start;
            for (var i = start; i < end; i++)
            {
                var pivot = factor[(i * d) + i];
                var rowOfU = factor.AsSpan((i * d) + i + 1, end - i - 1);
                for (var r = 0; r < rows; r++)
                {
                    var k = (r * d) + i;
                    var s = scales[k];
                    var z = zeroPoints[k];

                    // As QuantizeLinear (and QuantKernels): float division, clamp to [qmin - z, qmax - z], round half to even.
                    var step = (int)MathF.Round(Math.Clamp((float)matrix[k] / s, qmin - z, qmax - z));
                    levels[k] = step + z;
                    var error = (matrix[k] - (step * s)) / pivot;
                    errors[(r * BlockColumns) + (i - start)] = error;
                    var rest = matrix.AsSpan(k + 1, end - i - 1);
                    TensorPrimitives.MultiplyAdd(rowOfU, -error, rest, rest);
                }
            }

            // The lazy batch update: the block's errors reach every later column at once.
            if (end == d)
            {
                continue;
            }

            for (var r = 0; r < rows; r++)
            {
                var rest = matrix.AsSpan((r * d) + end, d - end);
                for (var i = 0; i < width; i++)
                {
                    var error = errors[(r * BlockColumns) + i];
                    if (error != 0)
                    {
                        TensorPrimitives.MultiplyAdd(factor.AsSpan(((start + i) * d) + end, d - end), -error, rest, rest);
                    }
                }
            }
        }

        return levels;
    }

    /// <summary>Σ over the calibration inputs of ‖ΔW x‖² = Σ_r δ_rᵀ (Σ x xᵀ) δ_r, for one row-major block.</summary>
    internal static double OutputError(double[] original, int[] levels, float[] scales, int[] zeroPoints, int columns, ReadOnlySpan<double> secondMoment)
    {
        var delta = new double[columns];
        var product = new double[columns];
        double total = 0;
        for (var r = 0; r < levels.Length / columns; r++)
        {
            for (var c = 0; c < columns; c++)
            {
                var k = (r * columns) + c;
                delta[c] = ((levels[k] - zeroPoints[k]) * scales[k]) - original[k];
            }

            for (var c = 0; c < columns; c++)
            {
                product[c] = TensorPrimitives.Dot<double>(secondMoment.Slice(c * columns, columns), delta);
            }

            total += TensorPrimitives.Dot<double>(delta, product);
        }

        return total;
    }

    /// <summary>
    /// The upper U with UᵀU = A⁻¹, or null when A is not positive definite. With J the order-reversing permutation,
    /// J A J = L Lᵀ (Cholesky) gives A⁻¹ = (J L⁻¹ J)ᵀ (J L⁻¹ J), and J L⁻¹ J is upper triangular: one Cholesky and one
    /// triangular inverse instead of an inverse and a second Cholesky.
    /// </summary>
    private static double[]? UpperFactorOfInverse(double[] a, int d)
    {
        // L of the reversed matrix, row-major, lower triangle.
        var l = new double[a.Length];
        for (var i = 0; i < d; i++)
        {
            var rowI = l.AsSpan(i * d, i + 1);
            for (var j = 0; j <= i; j++)
            {
                var reversed = a[((d - 1 - i) * d) + (d - 1 - j)];
                var dot = TensorPrimitives.Dot<double>(rowI[..j], l.AsSpan(j * d, j));
                var value = reversed - dot;
                if (i == j)
                {
                    if (!(value > 0) || !double.IsFinite(value))
                    {
                        return null;
                    }

                    rowI[j] = Math.Sqrt(value);
                }
                else
                {
                    rowI[j] = value / l[(j * d) + j];
                }
            }
        }

        // M = L⁻¹, kept transposed (Mt[j, i] = M[i, j]) so each sum runs over contiguous memory.
        var mt = new double[a.Length];
        for (var j = 0; j < d; j++)
        {
            var column = mt.AsSpan(j * d, d);
            column[j] = 1 / l[(j * d) + j];
            for (var i = j + 1; i < d; i++)
            {
                var dot = TensorPrimitives.Dot<double>(l.AsSpan((i * d) + j, i - j), column.Slice(j, i - j));
                column[i] = -dot / l[(i * d) + i];
            }
        }

        // U[i, j] = M[d-1-i, d-1-j] = Mt[d-1-j, d-1-i].
        var u = new double[a.Length];
        for (var i = 0; i < d; i++)
        {
            for (var j = i; j < d; j++)
            {
                u[(i * d) + j] = mt[((d - 1 - j) * d) + (d - 1 - i)];
            }
        }

        return u;
    }

    /// <summary>Maps a position in the weight's C-order values to its channel (0 for per-tensor).</summary>
    private static Func<int, int> ChannelIndex(IReadOnlyList<long> shape, int axis)
    {
        if (axis < 0)
        {
            return _ => 0;
        }

        var layout = ChannelLayout.For(shape, axis);
        return at => (at / layout.Inner) % layout.Channels;
    }
}

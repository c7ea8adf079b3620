namespace Bitbudget.Search.Quantization;

/// <summary>
/// Bias correction (Nagel et al., 2019, "Data-Free Quantization", section on biased error): quantizing W to W~
/// moves a linear layer's mean output by (W~ − W) E[x]; subtracting that from the bias puts the quantized layer's
/// mean output back on the FP32 layer's over the calibration inputs. The paper estimates E[x] from the preceding
/// BatchNormalization without data; here E[x] is measured on the calibration set, which the paper names as the
/// alternative when data is at hand (from memory).
/// </summary>
public static class BiasCorrection
{
    /// <summary>
    /// The amount to add to each output's bias, −Σ_c (W~ − W)[o, c] E[x_c], indexed by <see cref="LinearLayout.Output"/>
    /// (Conv: output channel; Gemm/MatMul: output column; recurrent W: gate row of each direction).
    /// </summary>
    public static float[] Shift(ReadOnlySpan<float> original, ReadOnlySpan<float> quantized, LinearLayout layout, InputMoments moments)
    {
        ArgumentNullException.ThrowIfNull(moments);
        if (original.Length != quantized.Length || layout.Count != original.Length || moments.Groups != layout.Groups || moments.Columns != layout.Columns)
        {
            throw new EngineException("quantized-weight-mismatch", "The layer's linear layout or input moments do not fit its weight.");
        }

        var shift = new float[layout.Groups * layout.Rows];
        for (var g = 0; g < layout.Groups; g++)
        {
            var mean = moments.Mean(g);
            for (var r = 0; r < layout.Rows; r++)
            {
                double moved = 0;
                for (var c = 0; c < layout.Columns; c++)
                {
                    var at = layout.Index(g, r, c);
                    moved += ((double)quantized[at] - original[at]) * mean[c];
                }

                shift[layout.Output(g, r)] = (float)-moved;
            }
        }

        return shift;
    }
}

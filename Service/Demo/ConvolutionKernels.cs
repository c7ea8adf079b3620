using System.Numerics.Tensors;

namespace Bitbudget.Service.Demo;

/// <summary>
/// 3x3 convolution with padding 1 for one sample, written as im2col plus row updates so the inner
/// loops are long spans that <see cref="TensorPrimitives"/> vectorises.
/// </summary>
internal static class ConvolutionKernels
{
    public const int Kernel = 3;
    public const int Padding = 1;

    public static int OutputSize(int inputSize, int stride) => ((inputSize + (2 * Padding) - Kernel) / stride) + 1;

    /// <summary>Unfolds one [channels, size, size] input into [channels * 9, outSize * outSize] columns.</summary>
    public static void Unfold(ReadOnlySpan<float> input, int channels, int size, int stride, Span<float> columns)
    {
        int outSize = OutputSize(size, stride);
        int positions = outSize * outSize;
        if (input.Length != channels * size * size || columns.Length != channels * Kernel * Kernel * positions)
        {
            throw new ArgumentException("Unfold buffers do not match the layer shape.");
        }

        for (int c = 0; c < channels; c++)
        {
            for (int kh = 0; kh < Kernel; kh++)
            {
                for (int kw = 0; kw < Kernel; kw++)
                {
                    Span<float> row = columns.Slice((((c * Kernel) + kh) * Kernel + kw) * positions, positions);
                    for (int oh = 0; oh < outSize; oh++)
                    {
                        int ih = (oh * stride) + kh - Padding;
                        for (int ow = 0; ow < outSize; ow++)
                        {
                            int iw = (ow * stride) + kw - Padding;
                            bool inside = ih >= 0 && ih < size && iw >= 0 && iw < size;
                            row[(oh * outSize) + ow] = inside ? input[(((c * size) + ih) * size) + iw] : 0f;
                        }
                    }
                }
            }
        }
    }

    /// <summary>Adds columns back onto a [channels, size, size] gradient (the adjoint of <see cref="Unfold"/>).</summary>
    public static void FoldAdd(ReadOnlySpan<float> columns, int channels, int size, int stride, Span<float> output)
    {
        int outSize = OutputSize(size, stride);
        int positions = outSize * outSize;
        for (int c = 0; c < channels; c++)
        {
            for (int kh = 0; kh < Kernel; kh++)
            {
                for (int kw = 0; kw < Kernel; kw++)
                {
                    ReadOnlySpan<float> row = columns.Slice((((c * Kernel) + kh) * Kernel + kw) * positions, positions);
                    for (int oh = 0; oh < outSize; oh++)
                    {
                        int ih = (oh * stride) + kh - Padding;
                        if (ih < 0 || ih >= size)
                        {
                            continue;
                        }

                        for (int ow = 0; ow < outSize; ow++)
                        {
                            int iw = (ow * stride) + kw - Padding;
                            if (iw >= 0 && iw < size)
                            {
                                output[(((c * size) + ih) * size) + iw] += row[(oh * outSize) + ow];
                            }
                        }
                    }
                }
            }
        }
    }

    /// <summary>output[o, p] = sum_k weights[o, k] * columns[k, p]; weights are [outChannels, k] as ONNX Conv stores them.</summary>
    public static void Multiply(ReadOnlySpan<float> weights, ReadOnlySpan<float> columns, int outChannels, int positions, Span<float> output)
    {
        int depth = weights.Length / outChannels;
        output.Slice(0, outChannels * positions).Clear();
        for (int o = 0; o < outChannels; o++)
        {
            Span<float> outRow = output.Slice(o * positions, positions);
            for (int k = 0; k < depth; k++)
            {
                TensorPrimitives.MultiplyAdd(columns.Slice(k * positions, positions), weights[(o * depth) + k], outRow, outRow);
            }
        }
    }
}
